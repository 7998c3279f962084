"""Exact sensitivities of outputs to constants (issue 27, part 1)."""

import math

import numpy as np
import pytest

import bvpkit

M, L = 2.0, 1.0


@pytest.fixture(scope="module")
def fin():
    problem = bvpkit.Problem(["theta'' = m**2*theta"], ["theta(0) = 1", "theta'(L) = 0"], (0, "L"),
                             constants={"m": M, "L": L})
    return bvpkit.solve(problem, tol=1e-8)


def test_pin_fin_tip_temperature_against_analytic(fin):
    s = fin.sensitivity(["theta(L)", "integral(theta)"], wrt=["m", "L"])
    # analytic: theta = cosh(m (L - x)) / cosh(m L), theta(L) = 1 / cosh(m L)
    assert s.derivatives["theta(L)"]["m"] == pytest.approx(-L * math.sinh(M * L) / math.cosh(M * L) ** 2, abs=1e-7)
    # analytic: d theta(L) / dL = -m sinh(mL) / cosh(mL)^2 (the domain end is the constant)
    assert s.derivatives["theta(L)"]["L"] == pytest.approx(-M * math.sinh(M * L) / math.cosh(M * L) ** 2, abs=1e-7)
    # analytic: integral(theta) = tanh(m L) / m
    d_dm = L / (M * math.cosh(M * L) ** 2) - math.tanh(M * L) / M ** 2
    assert s.derivatives["integral(theta)"]["m"] == pytest.approx(d_dm, abs=1e-7)
    assert s.derivatives["integral(theta)"]["L"] == pytest.approx(1 / math.cosh(M * L) ** 2, abs=1e-7)
    # the error estimates are finite, small, and cover the true error
    true = abs(s.derivatives["theta(L)"]["m"] + L * math.sinh(M * L) / math.cosh(M * L) ** 2)
    assert 0 <= s.errors["theta(L)"]["m"] < 1e-6
    assert true <= max(10 * s.errors["theta(L)"]["m"], 1e-12)
    assert s.matrix.shape == (2, 2) and "d/dm" in s.summary()
    assert s.values["theta(L)"] == pytest.approx(1 / math.cosh(M * L), abs=1e-8)  # analytic


def test_euler_column_load_against_euler():
    column = bvpkit.Problem(["EI*w'' + P*w = 0"], ["w(0) = 0", "w(Lc) = 0"], (0, "Lc"), eigenvalue="P", mode=1,
                            constants={"EI": 3.0, "Lc": 2.0})
    sol = bvpkit.solve(column, tol=1e-8)
    s = sol.sensitivity("P", wrt=["EI", "Lc"])
    # Euler: P = pi^2 EI / L^2, so dP/dEI = pi^2 / L^2 and dP/dL = -2 pi^2 EI / L^3
    assert s.derivatives["P"]["EI"] == pytest.approx(math.pi ** 2 / 4.0, abs=1e-7)
    assert s.derivatives["P"]["Lc"] == pytest.approx(-2 * math.pi ** 2 * 3.0 / 8.0, abs=1e-7)


def test_bratu_slope_against_centred_difference():
    bratu = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 1.0})
    s = bvpkit.solve(bratu, tol=1e-10).sensitivity("y'(0)", wrt="lam")
    # reference: a centred difference of two tight solves (step 1e-4: truncation ~1e-9)
    h = 1e-4
    up = bvpkit.solve(bratu.with_constants(lam=1 + h), tol=1e-11).evaluate("y'(0)")
    down = bvpkit.solve(bratu.with_constants(lam=1 - h), tol=1e-11).evaluate("y'(0)")
    assert s.derivatives["y'(0)"]["lam"] == pytest.approx((up - down) / (2 * h), abs=1e-6)


def test_free_end_moves_with_the_condition_it_meets():
    # y = sin(x) reaches a at s = asin(a): ds/da = 1 / sqrt(1 - a^2) (analytic)
    a = 0.5
    problem = bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y'(0) = 1", "y(s) = a"], (0, "s"),
                             unknown_parameters={"s": 0.6}, constants={"a": a})
    s = bvpkit.solve(problem, tol=1e-8).sensitivity(["s", "y'(s)"], wrt="a")
    assert s.derivatives["s"]["a"] == pytest.approx(1 / math.sqrt(1 - a * a), abs=1e-7)
    # analytic: y'(s) = cos(s) = sqrt(1 - a^2), d/da = -a / sqrt(1 - a^2)
    assert s.derivatives["y'(s)"]["a"] == pytest.approx(-a / math.sqrt(1 - a * a), abs=1e-7)


def test_bad_requests_are_refused_by_name(fin):
    with pytest.raises(bvpkit.BvpkitError, match="'h' is not a constant of the problem"):
        fin.sensitivity("theta(L)", wrt=["h"])
    with pytest.raises(bvpkit.BvpkitError, match="depends on the running point"):
        fin.sensitivity("theta", wrt=["m"])
    with pytest.raises(bvpkit.BvpkitError, match="named twice"):
        fin.sensitivity("theta(L)", wrt=["m", "m"])


def test_default_outputs_and_constants(fin):
    s = fin.sensitivity(["theta(L/2)"])
    assert s.wrt == ("m", "L") and np.isfinite(s.matrix).all()
