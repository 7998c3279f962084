"""Shared test settings: hypothesis profiles chosen with BVPKIT_HYPOTHESIS_PROFILE.

``ci`` (set by .ci/run): derandomised, 25 examples, no deadline (shared machines are noisy).
``dev`` (the default locally): 60 random examples. ``long``: 1000 examples, a soak run.
"""

from bvpkit.testing import register_profiles

register_profiles(default="dev")
