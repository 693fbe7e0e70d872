"""The app factory."""

from typing import Any

from flask import Flask
from flask.json.provider import DefaultJSONProvider
from redis import Redis

from service import auth, metrics, problems, request_ids
from service.extension import ServiceState, capabilities_of, limits_of
from service.feature_specs import FeatureSpecStore
from service.openapi import openapi_document
from service.queue import JobQueue
from service.quotas import Admission
from service.routes import health, v1
from service.settings import Settings
from workers.spec.jobs import DEFAULT_REDIS_URL

__all__ = ["create_app"]


class StrictJSONProvider(DefaultJSONProvider):
    """JSON out without NaN/Infinity (not JSON) and in the models' own key order."""

    sort_keys = False

    def dumps(self, obj: Any, **kwargs: Any) -> str:
        kwargs.setdefault("allow_nan", False)
        return super().dumps(obj, **kwargs)


def create_app(settings: Settings | None = None) -> Flask:
    """Build the API app; ``settings`` defaults to the ``LACUNA_*`` environment."""
    settings = settings or Settings()
    app = Flask(__name__, static_folder=None)
    app.json = StrictJSONProvider(app)
    app.config["MAX_CONTENT_LENGTH"] = settings.max_body_bytes
    url = settings.redis_url or DEFAULT_REDIS_URL
    timeout = settings.redis_timeout_s
    redis = Redis.from_url(url, socket_connect_timeout=timeout, socket_timeout=timeout)
    waiting_redis = Redis.from_url(
        url, socket_connect_timeout=timeout, socket_timeout=settings.max_wait_s + timeout
    )
    limits = limits_of(settings)
    app.extensions["lacuna"] = ServiceState(
        settings=settings,
        queue=JobQueue(redis, waiting_redis, settings),
        feature_specs=FeatureSpecStore(redis, settings),
        limits=limits,
        capabilities=capabilities_of(limits),
        openapi=openapi_document(),
    )
    request_ids.register(app)
    metrics.register(app)
    problems.register(app)
    auth.install(app, Admission(redis, settings), settings)
    app.register_blueprint(v1)
    app.register_blueprint(health)
    return app
