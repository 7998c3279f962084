"""Uncertainty of constants carried to outputs (issue 27, part 3)."""

import math
import subprocess
import sys

import numpy as np
import pytest

import bvpkit

M, L, SD = 2.0, 1.0, 0.05


@pytest.fixture(scope="module")
def fin():
    problem = bvpkit.Problem(["theta'' = m**2*theta"], ["theta(0) = 1", "theta'(L) = 0"], (0, "L"),
                             constants={"m": M, "L": L})
    return bvpkit.solve(problem, tol=1e-6)


def test_first_order_and_sampled_spread_of_the_tip_temperature(fin):
    spread = fin.propagate({"m": SD}, ["theta(L)"], samples=2000, seed=1)
    # analytic: |d theta(L)/dm| sigma_m with d theta(L)/dm = -L sinh(mL)/cosh(mL)^2
    first = abs(-L * math.sinh(M * L) / math.cosh(M * L) ** 2) * SD
    assert spread.deviations["theta(L)"] == pytest.approx(first, rel=1e-6)
    # 2000 samples: the sample standard deviation's own relative spread is 1/sqrt(2 N) = 1.6 %
    assert spread.sampled["theta(L)"] == pytest.approx(first, rel=0.05)
    assert spread.failed == 0 and spread.samples.shape == (2000, 1)
    assert "first order" in spread.summary()


def test_covariance_of_two_constants(fin):
    # analytic: first-order variance s^T C s with the pin fin's derivatives in m and L
    c = np.array([[SD ** 2, 0.5 * SD * 0.01], [0.5 * SD * 0.01, 0.01 ** 2]])
    spread = fin.propagate({"m": SD, "L": 0.01}, ["theta(L)"], covariance=c)
    s = np.array([-L * math.sinh(M * L), -M * math.sinh(M * L)]) / math.cosh(M * L) ** 2
    assert spread.deviations["theta(L)"] == pytest.approx(math.sqrt(s @ c @ s), rel=1e-6)
    assert spread.sampled is None


def test_a_fit_gives_its_covariance(fin):
    x = np.linspace(0.1, 1.0, 10)
    y = np.cosh(M * (L - x)) / np.cosh(M * L)  # analytic profile, no noise
    result = bvpkit.fit(fin.prepared, {"theta": (x, y)}, vary={"m": 1.8}, sigma=0.01)
    spread = result.solution.propagate(result, ["theta(L)"])
    assert spread.deviations["theta(L)"] == pytest.approx(
        abs(L * math.sinh(M * L) / math.cosh(M * L) ** 2) * result.errors["m"], rel=1e-4)


@pytest.mark.parametrize("args, kwargs, match", [
    (({"h": 1.0}, ["theta(L)"]), {}, "'h' is not a constant"),
    (({"m": -1.0}, ["theta(L)"]), {}, "not negative"),
    (({"m": 0.1}, ["theta(L)"]), {"covariance": [[1.0, 0.0]]}, "must be 1 x 1"),
    (({"m": 0.1}, ["theta(L)"]), {"samples": 1}, "at least 2"),
])
def test_bad_requests(fin, args, kwargs, match):
    with pytest.raises(bvpkit.BvpkitError, match=match):
        fin.propagate(*args, **kwargs)


def test_a_solution_from_a_trace_in_a_fresh_process_can_be_sampled():
    # the sampler is wired where the public entry points are: a user who only traces gets it too
    code = ("import bvpkit\n"
            "p = bvpkit.Problem([\"T'' = m**2*T\"], ['T(0) = 1', \"T'(1) = 0\"], (0, 1), constants={'m': 1.0})\n"
            "s = bvpkit.trace(p, 'm', start=1.0, stop=2.0).solutions[-1]\n"
            "print(s.propagate({'m': 0.05}, ['T(1)'], samples=20, seed=1).failed)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=False)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["0"]
