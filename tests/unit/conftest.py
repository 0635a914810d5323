"""Unit-test settings: a modest Hypothesis budget keeps the suite fast."""

from hypothesis import HealthCheck, settings

settings.register_profile(
    "unit",
    max_examples=60,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow],
)
settings.load_profile("unit")
