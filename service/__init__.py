"""HTTP layer of lacuna: app factory, routes, problem errors, queue submission, command line."""

from service.app import create_app
from service.settings import Settings

__all__ = ["create_app", "Settings"]
