"""Shared test settings: hypothesis profiles chosen with BVPKIT_HYPOTHESIS_PROFILE.

``ci`` (set by .ci/run): derandomised, 25 examples, no deadline (shared machines are noisy).
``dev`` (the default locally): 60 random examples. ``long``: 1000 examples, a soak run.
Generated code is cached in a temporary folder unless BVPKIT_CACHE_DIR is set, so the
hundreds of drawn problems do not fill the user's own cache.
"""

import os
import tempfile

from bvpkit.testing import register_profiles

os.environ.setdefault("BVPKIT_CACHE_DIR", tempfile.mkdtemp(prefix="bvpkit-test-cache-"))
register_profiles(default="dev")
