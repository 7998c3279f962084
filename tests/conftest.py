"""Shared test settings: hypothesis profiles chosen with BVPKIT_HYPOTHESIS_PROFILE.

``ci`` (the default, and what .ci/run sets): derandomised, 25 examples, no deadline (shared
machines are noisy). ``dev``: 60 fresh random examples. ``long``: 1000 examples, a soak run.
Properties whose every example is a whole solve draw a share of these
(``bvpkit.testing.scaled_examples``). Tests marked ``slow`` are left out unless asked for
(``-m slow``, or ``-m "slow or not slow"`` for everything); see DEVELOPERS.md.
Generated code is cached in a temporary folder unless BVPKIT_CACHE_DIR is set, so the
hundreds of drawn problems do not fill the user's own cache.
"""

import os
import tempfile

from bvpkit.testing import register_profiles

os.environ.setdefault("BVPKIT_CACHE_DIR", tempfile.mkdtemp(prefix="bvpkit-test-cache-"))
register_profiles(default="ci")
