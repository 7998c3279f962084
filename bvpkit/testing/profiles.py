"""Hypothesis profiles for verification tests, chosen with an environment variable."""

from __future__ import annotations

import math
import os

PROFILE_VARIABLE = "BVPKIT_HYPOTHESIS_PROFILE"

#: Examples per test in each profile. ``ci`` is what ``python -m pytest -q`` uses unless told
#: otherwise: derandomised, so a run is repeatable, and sized so the whole suite stays within
#: a few minutes on 2 cores. ``dev`` explores with fresh random draws; ``long`` is a soak run.
EXAMPLES = {"ci": 25, "dev": 60, "long": 1000}


def register_profiles(default: str = "ci") -> str:
    """Register ``ci``, ``dev`` and ``long`` profiles and load the one the environment names.

    ``ci``: derandomised, 25 examples, no deadline (shared machines are noisy);
    ``dev``: 60 random examples; ``long``: 1000 examples for a soak run. The profile is
    read from ``BVPKIT_HYPOTHESIS_PROFILE`` (default ``default``, itself ``ci``). Returns
    its name.
    """
    from hypothesis import HealthCheck, settings

    quiet = [HealthCheck.too_slow, HealthCheck.filter_too_much]
    settings.register_profile("ci", derandomize=True, max_examples=EXAMPLES["ci"], deadline=None,
                              suppress_health_check=quiet)
    settings.register_profile("dev", max_examples=EXAMPLES["dev"], deadline=None, suppress_health_check=quiet)
    settings.register_profile("long", max_examples=EXAMPLES["long"], deadline=None,
                              suppress_health_check=quiet)
    name = os.environ.get(PROFILE_VARIABLE, default)
    settings.load_profile(name)
    return name


def scaled_examples(share: float) -> int:
    """A share of the loaded profile's examples, for a property whose every example is a
    whole solve (or several): ``@settings(max_examples=scaled_examples(0.4))`` draws 10 in
    ``ci``, 24 in ``dev`` and 400 in ``long``, so the soak run still soaks.

    Parameters
    ----------
    share : float
        Between 0 and 1.

    Returns
    -------
    int
        At least 1.
    """
    from hypothesis import settings

    if not 0 < share <= 1:
        raise ValueError(f"share must be in (0, 1], got {share!r}")
    return max(1, math.ceil(share * settings.default.max_examples))
