"""Shared test settings: a bounded hypothesis profile so the suite stays fast on two cores."""
import os

from hypothesis import HealthCheck, settings

settings.register_profile("ci", max_examples=25, deadline=None,
                          suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("thorough", max_examples=400, deadline=None)
settings.load_profile(os.environ.get("QGRADLIB_HYPOTHESIS", "ci"))
