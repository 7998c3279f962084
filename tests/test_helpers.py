"""Small pure helpers checked against reference libraries before the end-to-end tests rely on them."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.interpolate import CubicHermiteSpline

from bvpkit.methods.diagnostics import Hermite
from bvpkit.reduce.eigenvalue import interior_zeros


@given(st.integers(2, 30), st.integers(0, 2**32 - 1))
def test_hermite_matches_scipy(m, seed):
    rng = np.random.default_rng(seed)
    x = np.cumsum(rng.uniform(0.1, 1.0, m))
    y, dy = rng.normal(size=(2, m)), rng.normal(size=(2, m))
    points = np.linspace(x[0], x[-1], 57)
    ours, theirs = Hermite(x, y, dy), CubicHermiteSpline(x, y, dy, axis=1)
    assert np.allclose(ours(points), theirs(points), rtol=1e-12, atol=1e-12)  # scipy.interpolate
    assert np.allclose(ours.derivative()(points), theirs.derivative()(points), rtol=1e-10, atol=1e-10)
    assert np.allclose(ours(x[1]), theirs(x[1]))
    assert np.all(np.isnan(ours(np.array([x[0] - 1.0, x[-1] + 1.0]))))


def test_hermite_reproduces_cubics_exactly():
    x = np.array([0.0, 0.3, 1.0, 2.5])
    f = lambda t: 2 * t**3 - t + 1  # noqa: E731
    df = lambda t: 6 * t**2 - 1  # noqa: E731
    h = Hermite(x, f(x)[None, :], df(x)[None, :])
    t = np.linspace(0, 2.5, 31)
    assert h(t)[0] == pytest.approx(f(t), abs=1e-12)  # analytic: Hermite cubics are exact on cubics


@pytest.mark.parametrize(("values", "zeros"), [([1, 2, 3], 0), ([1, -1, 1], 2), ([0, 1, 0, -1, 0], 1), ([1, 1e-20, -1e-20, 1], 0)])
def test_interior_zeros(values, zeros):
    assert interior_zeros(np.array(values, float)) == zeros  # common practice, no source
