"""Shared test settings: hypothesis profiles chosen with BVPKIT_HYPOTHESIS_PROFILE.

``ci`` (used by .ci/run): derandomised, bounded examples, no deadline (shared machines are
noisy). ``dev`` (default locally): more examples. ``long``: a soak run.
"""

import os

from hypothesis import HealthCheck, settings

settings.register_profile(
    "ci", derandomize=True, max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow]
)
settings.register_profile("dev", max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("long", max_examples=1000, deadline=None, suppress_health_check=[HealthCheck.too_slow])
settings.load_profile(os.environ.get("BVPKIT_HYPOTHESIS_PROFILE", "dev"))
