"""Shared test settings: a bounded hypothesis profile so the suite stays fast on two cores,
and a fixture for tests that measure a call's own memory."""
import os

import pytest
from hypothesis import HealthCheck, settings

from qgradlib.engine import scratch

settings.register_profile("ci", max_examples=25, deadline=None,
                          suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("thorough", max_examples=400, deadline=None)
settings.load_profile(os.environ.get("QGRADLIB_HYPOTHESIS", "ci"))


@pytest.fixture
def no_scratch_pool(monkeypatch):
    """No buffers kept between engine calls (`qgradlib.engine.scratch`): the memory guard's
    estimates are of each call's own work; the pool (at most ``POOL_BYTES``) is bounded on
    its own in tests/test_scratch.py."""
    monkeypatch.setattr(scratch, "ARRAY_BYTES", -1)
    scratch.clear()
