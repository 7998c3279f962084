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


def test_classes_singular_centre_regions_algebraic_infinite_complex():
    # analytic: pellet c'' + (2/r) c' = phi^2 c, c'(0) = 0, c(1) = 1 gives c'(1) = phi coth(phi) - 1,
    # d/dphi = coth(phi) - phi / sinh(phi)^2
    pellet = bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c(1) = 1"], (0, 1), independent="r",
                            constants={"phi": 2.0})
    d = bvpkit.solve(pellet, tol=1e-8).sensitivity("c'(1)", wrt="phi").derivatives["c'(1)"]["phi"]
    assert d == pytest.approx(1 / math.tanh(2.0) - 2.0 / math.sinh(2.0) ** 2, abs=1e-7)
    # analytic: two layers in series, q = dT / (a/k1 + R + b/k2); dq/dR = -q^2/dT, dq/da = -q^2/(k1 dT)
    wall = bvpkit.Problem(["T' = -q/k", "q' = 0"], ["T(0) = 1150", "T(a + b) = 320", "T(a-) - T(a+) = R*q(a)"],
                          (0, "a + b"), constants={"k": 1.4, "a": 0.23, "b": 0.11, "R": 0.02},
                          regions=[{"end": "a", "constants": {"k": 1.4}}, {"constants": {"k": 0.16}}])
    s = bvpkit.solve(wall, tol=1e-8).sensitivity("q(0)", wrt=["a", "R"])
    q = 830 / (0.23 / 1.4 + 0.02 + 0.11 / 0.16)
    assert s.derivatives["q(0)"]["R"] == pytest.approx(-q * q / 830, rel=1e-9)
    assert s.derivatives["q(0)"]["a"] == pytest.approx(-q * q / 830 / 1.4, rel=1e-9)
    # analytic: theta = exp(-m x) on (0, inf): theta'(0) = -m
    far = bvpkit.Problem(["theta'' = m**2*theta"], ["theta(0) = 1", "theta(inf) = 0"], (0, "inf"),
                         constants={"m": 2.0})
    assert bvpkit.solve(far, tol=1e-8).sensitivity("theta'(0)", wrt="m").derivatives["theta'(0)"]["m"] == \
        pytest.approx(-1.0, abs=1e-7)
    # analytic: T = exp(-sqrt(i w) x), |T(x)| = exp(-sqrt(w/2) x): d|T(0.1)|/dw = -0.1/(2 sqrt(2w)) exp(-0.1 sqrt(w/2))
    ground = bvpkit.Problem(["T'' = 1j*w*T"], ["T(0) = 1", "T(inf) = 0"], (0, "inf"), constants={"w": 2.0})
    d = bvpkit.solve(ground, tol=1e-8).sensitivity("abs(T(0.1))", wrt="w").derivatives["abs(T(0.1))"]["w"]
    assert d == pytest.approx(-0.1 / (2 * math.sqrt(4.0)) * math.exp(-0.1), abs=1e-7)


def test_algebraic_unknowns_against_centred_difference():
    # reference: a centred difference of two tight solves (step 1e-5)
    cooler = bvpkit.Problem(["Th' = -a*(Th - Tw)", "Tc' = -b*(Tw - Tc)", "0 = h1*(Th - Tw) - h2*(Tw - Tc)"],
                            ["Th(0) = 1", "Tc(1) = 0"], (0, 1), unknowns=["Th", "Tc", "Tw"],
                            constants={"a": 2.0, "b": 1.5, "h1": 1.0, "h2": 3.0})
    d = bvpkit.solve(cooler, tol=1e-8).sensitivity("Tw(0)", wrt="a").derivatives["Tw(0)"]["a"]
    h = 1e-5
    up = bvpkit.solve(cooler.with_constants(a=2 + h), tol=1e-11).evaluate("Tw(0)")
    down = bvpkit.solve(cooler.with_constants(a=2 - h), tol=1e-11).evaluate("Tw(0)")
    assert d == pytest.approx((up - down) / (2 * h), abs=1e-6)
