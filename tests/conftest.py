"""Shared test settings: hypothesis profiles chosen with BVPKIT_HYPOTHESIS_PROFILE.

``ci`` (the default, and what .ci/run sets): derandomised, 25 examples, no deadline (shared
machines are noisy). ``dev``: 60 fresh random examples. ``long``: 1000 examples, a soak run.
Properties whose every example is a whole solve draw a share of these
(``bvpkit.testing.scaled_examples``). Tests marked ``slow`` are left out unless asked for
(``-m slow``, or ``-m "slow or not slow"`` for everything); see DEVELOPERS.md.
Generated code is cached in a temporary folder unless BVPKIT_CACHE_DIR is set, so the
hundreds of drawn problems do not fill the user's own cache.

Tests that need an optional extra (plot, dask, progress, tables) are marked ``extra`` and skip
without it, so the README's command passes with only ``.[test]`` installed. ``.ci/run``'s
second step installs the extras and runs ``-m extra`` with BVPKIT_EXTRAS=required, under which
such a skip is a failure (a step that skipped everything would prove nothing).
"""

import os
import tempfile

import pytest

from bvpkit.testing import register_profiles

os.environ.setdefault("BVPKIT_CACHE_DIR", tempfile.mkdtemp(prefix="bvpkit-test-cache-"))
register_profiles(default="ci")


_EXTRAS_REQUIRED = os.environ.get("BVPKIT_EXTRAS") == "required"


@pytest.hookimpl(hookwrapper=True)
def pytest_runtest_makereport(item, call):  # noqa: ANN001, ANN201
    outcome = yield
    report = outcome.get_result()
    if _EXTRAS_REQUIRED and report.skipped and item.get_closest_marker("extra") is not None:
        report.outcome = "failed"
        report.longrepr = f"skipped although the extras are required here: {report.longrepr}"


@pytest.hookimpl(hookwrapper=True)
def pytest_make_collect_report(collector):  # noqa: ANN001, ANN201
    outcome = yield
    report = outcome.get_result()
    if _EXTRAS_REQUIRED and report.skipped:
        report.outcome = "failed"
        report.longrepr = f"skipped although the extras are required here: {report.longrepr}"
