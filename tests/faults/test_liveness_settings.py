"""The liveness settings: a lifetime must hold several heartbeats, and the bound on a dead
worker's job that the README states follows from the defaults."""

import pytest
from pydantic import ValidationError

from service.settings import Settings
from workers.settings import WorkerSettings


def test_a_lifetime_shorter_than_three_heartbeats_is_refused() -> None:
    with pytest.raises(ValidationError, match="at least three heartbeats"):
        WorkerSettings(heartbeat_interval_s=20, dead_after_s=30)
    WorkerSettings(heartbeat_interval_s=10, dead_after_s=30)  # exactly three: accepted


def test_the_defaults_bound_a_dead_workers_job_under_a_minute() -> None:
    worker = WorkerSettings()
    # A claim lapses dead_after_s after the last beat and is reaped at the next beat of a
    # live worker (workers/reaper.py).
    assert worker.dead_after_s + worker.heartbeat_interval_s < 60
    assert worker.lost_job_retries == 1
    # The API and the workers read one variable for what dead means.
    assert Settings().dead_after_s == worker.dead_after_s


def test_api_and_workers_read_the_same_variable(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("LACUNA_DEAD_AFTER_S", "15")
    assert Settings().dead_after_s == WorkerSettings().dead_after_s == 15
