"""A real ``lacuna serve`` (API and two local workers) per module, on the e2e database."""

from collections.abc import Iterator

import pytest

from tests.support.redis import E2E_DB, with_database
from tests.support.stack import running_stack


@pytest.fixture(scope="module")
def base(redis_server: str) -> Iterator[str]:
    """Base URL of a ``lacuna serve`` started for this module and stopped after it."""
    with running_stack(with_database(redis_server, E2E_DB)) as url:
        yield url
