"""Fault tests: each gets a lab of its own (a restartable Redis, real workers, the API)."""

from collections.abc import Iterator

import pytest

from tests.support.faults import FaultLab, fault_lab


@pytest.fixture
def lab() -> Iterator[FaultLab]:
    with fault_lab() as started:
        yield started
