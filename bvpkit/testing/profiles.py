"""Hypothesis profiles for verification tests, chosen with an environment variable."""

from __future__ import annotations

import os

PROFILE_VARIABLE = "BVPKIT_HYPOTHESIS_PROFILE"


def register_profiles(default: str = "dev") -> str:
    """Register ``ci``, ``dev`` and ``long`` profiles and load the one the environment names.

    ``ci``: derandomised, 25 examples, no deadline (shared machines are noisy);
    ``dev``: 60 random examples; ``long``: 1000 examples for a soak run. The profile is
    read from ``BVPKIT_HYPOTHESIS_PROFILE`` (default ``default``). Returns its name.
    """
    from hypothesis import HealthCheck, settings

    quiet = [HealthCheck.too_slow, HealthCheck.filter_too_much]
    settings.register_profile("ci", derandomize=True, max_examples=25, deadline=None, suppress_health_check=quiet)
    settings.register_profile("dev", max_examples=60, deadline=None, suppress_health_check=quiet)
    settings.register_profile("long", max_examples=1000, deadline=None, suppress_health_check=quiet)
    name = os.environ.get(PROFILE_VARIABLE, default)
    settings.load_profile(name)
    return name
