"""Infinite domains: both ends infinite (fronts, bound states, a forced decaying field), far
fields that decay like a power (asymptotic conditions), and their bad input. Each check value
has its source beside it."""

import math
import re

import numpy as np
import pytest
import scipy.special as special

import bvpkit
from bvpkit.errors import ProblemError
from bvpkit.reduce.infinite import Infinite, far_names
from bvpkit.reduce.prepared import prepare
from bvpkit.reduce.transform import Transform
from bvpkit.solver.driver import options
from bvpkit.solver.start import initial

FRONT = "u'' + c*u' + u*(1 - u)*(u - a) = 0"


def front(a: float) -> bvpkit.Problem:
    # a bistable front joining u = 1 (left) to u = 0 (right), placed by u(0) = 1/2; no guess
    return bvpkit.Problem([FRONT], ["u(-inf) = 1", "u(inf) = 0", "u(0) = 1/2"], ("-inf", "inf"),
                          constants={"a": a}, unknown_parameters={"c": 0.0})


# -- both ends infinite -----------------------------------------------------------------------
def test_a_forced_field_on_the_whole_line_matches_its_convolution_solution():
    p = bvpkit.Problem(["y'' - y = -2*exp(-x**2)"], ["y(-inf) = 0", "y(inf) = 0"], ("-inf", "inf"))
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    x = np.array([-6.0, -2.0, -0.5, 0.0, 0.7, 3.0, 8.0])
    # analytic: y = (exp(-|x|)/2) * (2 exp(-x^2)) convolved
    #   = (sqrt(pi)/2) e^(1/4) [e^-x erfc(1/2 - x) + e^x erfc(1/2 + x)]
    exact = (math.sqrt(math.pi) / 2 * math.exp(0.25)
             * (np.exp(-x) * special.erfc(0.5 - x) + np.exp(x) * special.erfc(0.5 + x)))
    assert sol.evaluate("y", at=x) == pytest.approx(exact, abs=1e-7)
    # second check: the same equation on [-30, 30] with the far conditions there
    finite = bvpkit.solve(bvpkit.Problem(["y'' - y = -2*exp(-x**2)"], ["y(-30) = 0", "y(30) = 0"], (-30, 30)),
                          tol=1e-8)
    assert sol.evaluate("y", at=x) == pytest.approx(finite.evaluate("y", at=x), abs=1e-7)
    assert "infinity placed at x = -" in sol.message and " and " in sol.message


@pytest.mark.parametrize("mode", [1, 2, 3])
def test_harmonic_oscillator_levels_on_the_whole_line(mode):
    p = bvpkit.Problem(["y'' = (x**2 - E)*y"], ["y(-inf) = 0", "y(inf) = 0"], ("-inf", "inf"), eigenvalue="E",
                       mode=mode)
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    assert sol.parameters["E"] == pytest.approx(2 * mode - 1, abs=1e-8)  # analytic: E = 2n + 1 (Hermite functions)
    # the eigenfunction is the normalised Hermite function (analytic: H_{n} e^{-x^2/2}, norm 1)
    x = np.linspace(-3, 3, 13)
    n = mode - 1
    hermite = special.eval_hermite(n, x) * np.exp(-x**2 / 2) / math.sqrt(2**n * math.factorial(n) * math.sqrt(math.pi))
    assert np.abs(sol.evaluate("y", at=x)) == pytest.approx(np.abs(hermite), abs=1e-6)


def test_bistable_front_speed_and_profile_from_no_guess():
    a = 0.25
    sol = bvpkit.solve(front(a), tol=1e-9)
    assert sol.success, sol.message
    # McKean 1970 (analytic): with u'' + c u' + u(1 - u)(u - a) = 0 the front from 1 to 0 moves
    # at c = sqrt(2) (1/2 - a) with the profile 1/(1 + exp(x/sqrt(2))) (u(0) = 1/2 places it)
    assert sol.parameters["c"] == pytest.approx(math.sqrt(2) * (0.5 - a), abs=1e-7)
    x = np.linspace(-15, 15, 31)
    assert sol.evaluate("u", at=x) == pytest.approx(1 / (1 + np.exp(x / math.sqrt(2))), abs=1e-7)


def test_the_default_guess_of_a_front_levels_off_on_both_sides():
    prepared = prepare(front(0.25))
    t, y, _ = initial(prepared, prepared.k(), None, options(None, {}))
    u = np.concatenate([y[0], y[2]])  # the two regions, left to right
    # analytic property of the levelled guess (1 - tanh(x/w))/2: 1 far left, 1/2 at 0, 0 far right, falling
    assert u[0] == pytest.approx(1.0, abs=2e-3) and u[-1] == pytest.approx(0.0, abs=2e-3)
    assert y[0, -1] == pytest.approx(0.5) and y[2, 0] == pytest.approx(0.5)
    assert np.all(np.diff(u) <= 1e-12)
    # flat at the far ends, not the straight line through them
    assert abs(y[1, 0]) < 1e-2 and abs(y[3, -1]) < 1e-2


def test_a_trace_of_the_front_speed():
    branch = bvpkit.trace(front(0.1), "a", start=0.1, stop=0.4, outputs=["c"], tol=1e-7)
    assert branch.success, branch.message
    a = np.array(branch.parameter)
    c = np.array([s.parameters["c"] for s in branch.solutions])
    assert a[-1] == pytest.approx(0.4) and len(a) >= 3
    assert c == pytest.approx(math.sqrt(2) * (0.5 - a), abs=1e-6)  # McKean 1970 (analytic)


# -- algebraic decay --------------------------------------------------------------------------
def test_algebraic_decay_is_met_at_a_modest_length():
    p = bvpkit.Problem(["y'' = 2*y/(1 + x)**2"], ["y(0) = 1", "y(inf) = 0"], (0, "inf"))
    sol = bvpkit.solve(p, tol=1e-7)
    assert sol.success, sol.message
    assert sol.evaluate("y'(0)") == pytest.approx(-1.0, abs=1e-6)  # analytic: y = 1/(1 + x)
    x = np.array([0.5, 3.0, 9.0])
    assert sol.evaluate("y", at=x) == pytest.approx(1 / (1 + x), abs=1e-6)
    assert sol.diagnostics.truncation_length <= 100
    assert "algebraic" in sol.message


@pytest.mark.parametrize(("far", "slope"), [(0.0, -1.0), (3.0, 2.0)])
def test_radial_conduction_to_an_infinite_medium(far, slope):
    # T = far + (1 - far)/r outside a sphere of radius 1 held at T = 1 (analytic: (r^2 T')' = 0)
    p = bvpkit.Problem(["T'' + 2*T'/r = 0"], ["T(1) = 1", f"T(inf) = {far}"], (1, "inf"), independent="r")
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    assert sol.evaluate("T'(1)") == pytest.approx(slope, abs=1e-7)


def test_algebraic_decay_on_the_whole_line():
    # analytic: y = 1/(1 + x^2) solves y'' = 6 x^2 y/(1 + x^2)^2 - 2/(1 + x^2)^3 (substituted by hand)
    p = bvpkit.Problem(["y'' = 6*x**2*y/(1 + x**2)**2 - 2/(1 + x**2)**3"], ["y(-inf) = 0", "y(inf) = 0"],
                       ("-inf", "inf"))
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    x = np.array([-4.0, 0.0, 1.0, 7.0])
    assert sol.evaluate("y", at=x) == pytest.approx(1 / (1 + x**2), abs=1e-7)


def test_a_limit_the_equations_do_not_approach_is_not_reported_solved():
    # the bounded solutions of y'' = 2 (y - 1)/(1 + x)^2 tend to 1 (analytic: 1 + A/(1 + x)); 5 is not reachable
    p = bvpkit.Problem(["y'' = 2*(y - 1)/(1 + x)**2"], ["y(0) = 0", "y(inf) = 5"], (0, "inf"))
    sol = bvpkit.solve(p)
    assert not sol.success
    assert sol.status is bvpkit.Status.TRUNCATION, sol.message


def test_a_nonlinear_algebraic_decay_is_not_solved_and_says_how_the_changes_fall():
    # y'' = 2 y^3, y(0) = 1, y(inf) = 0: y = 1/(1 + x) (analytic), so truncating at L changes the
    # solution by O(1/L); the linearised far field (y'' = 0) shows no decay to fit
    sol = bvpkit.solve(bvpkit.Problem(["y'' = 2*y**3"], ["y(0) = 1", "y(inf) = 0"], (0, "inf")), method="collocation")
    assert sol.status is bvpkit.Status.TRUNCATION, sol.message
    q = float(re.search(r"falls only like L\^-([0-9.]+)", sol.message).group(1))
    assert 0.8 < q < 1.2  # analytic: the change of a 1/x tail falls like 1/L
    assert "far-field condition of your own" in sol.message


def test_an_exponential_far_field_keeps_the_conditions_as_written():
    p = bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"], (0, "inf"))
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    assert sol.evaluate("f''(0)") == pytest.approx(0.332057336215, abs=1e-9)  # Blasius: Howarth 1938, f''(0)
    k = sol.interpolant.k
    names = list(sol.prepared.layout.constants)
    far = np.array([k[names.index(n)] for n in far_names(1, 3)])
    assert far == pytest.approx(np.r_[np.eye(3).ravel(), np.zeros(3)], abs=0)  # the identity map
    assert "algebraic" not in sol.message


def test_algebraic_trace_refits_the_far_field():
    p = bvpkit.Problem(["y'' = q*y/(1 + x)**2"], ["y(0) = 1", "y(inf) = 0"], (0, "inf"), constants={"q": 2.0})
    branch = bvpkit.trace(p, "q", start=2.0, stop=6.0, outputs=["y'(0)"], tol=1e-7)
    assert branch.success, branch.message
    q = np.array(branch.parameter)
    slope = np.array([s.evaluate("y'(0)") for s in branch.solutions]).ravel()
    # analytic: y = (1 + x)^m with m (m - 1) = q, the decaying root m = (1 - sqrt(1 + 4 q))/2
    assert slope == pytest.approx((1 - np.sqrt(1 + 4 * q)) / 2, abs=1e-6)


def test_the_infinite_class_reads_back_from_plain_data():
    prepared = prepare(front(0.25))
    (infinite,) = [t for t in prepared.transforms if isinstance(t, Infinite)]
    assert infinite.infinite == (True, True) and infinite.far == ((0,), (1,))
    again = Transform.from_plain(infinite.plain())
    assert again == infinite
    with pytest.raises(ValueError, match="infinite"):
        Transform.from_plain({**infinite.plain(), "far": [[0], "x"]})


# -- bad input --------------------------------------------------------------------------------
def test_a_front_whose_translation_is_free_asks_for_a_phase_condition():
    with pytest.raises(ProblemError, match=r"can be shifted along x.*u\(0\) = \.\.\."):
        bvpkit.Problem([FRONT], ["u(-inf) = 1", "u(inf) = 0"], ("-inf", "inf"), constants={"a": 0.25},
                       unknown_parameters={"c": 0.0})
    # with the speed known the count adds up, but the translation is still free
    with pytest.raises(ProblemError, match="can be shifted along x.*unknown parameter"):
        bvpkit.Problem([FRONT], ["u(-inf) = 1", "u(inf) = 0"], ("-inf", "inf"), constants={"a": 0.25, "c": 0.3})
    # a condition holding x (the centre of mass) fixes the position: accepted
    bvpkit.Problem([FRONT], ["u(-inf) = 1", "u(inf) = 0", "integral(x*u*(1 - u)) = 0"], ("-inf", "inf"),
                   constants={"a": 0.25}, unknown_parameters={"c": 0.0})


def test_a_two_sided_condition_count_that_does_not_add_up_is_explained():
    with pytest.raises(ProblemError, match=r"1 boundary condition\(s\) given, 2 needed.*one condition at each end"):
        bvpkit.Problem(["y'' - y = -2*exp(-x**2)"], ["y(inf) = 0"], ("-inf", "inf"))
    with pytest.raises(ProblemError, match="3 boundary condition.*speed as an unknown parameter"):
        bvpkit.Problem([FRONT], ["u(-inf) = 1", "u(inf) = 0", "u(0) = 1/2"], ("-inf", "inf"),
                       constants={"a": 0.25, "c": 0.3})


def test_conditions_at_minus_and_plus_infinity_are_different_points():
    p = bvpkit.Problem(["y'' - y = -2*exp(-x**2)"], ["y(-inf) = 0", "y(inf) = 0"], ("-inf", "inf"))
    assert p.which_point(p.points[0]) == 0 and p.which_point(p.points[-1]) == 1


def test_the_bundled_ribbon_front_gives_its_analytic_speed_and_width():
    from pathlib import Path

    spec = Path(__file__).resolve().parent.parent / "specs" / "ribbon_cure_front.toml"
    sol = bvpkit.solve(bvpkit.load(spec))
    assert sol.success, sol.message
    D, r, a = 20.0, 5.0, 0.2  # the spec's constants
    # McKean 1970 (analytic), in units: V = sqrt(2 D r) (1/2 - a); profile 1/(1 + exp(x/d)), d = sqrt(2 D/r),
    # whose slope at 0 is -1/(4 d)
    assert sol.outputs["front_speed_mm_per_s"] == pytest.approx(math.sqrt(2 * D * r) * (0.5 - a), rel=1e-7)
    assert sol.outputs["front_width_mm"] == pytest.approx(4 * math.sqrt(2 * D / r), rel=1e-7)


def test_a_heated_sphere_in_an_infinite_medium_with_its_singular_centre():
    # (r^2 T')' = -r^2 exp(-r), T'(0) = 0, T(inf) = 0; analytic (integrated twice by hand):
    # T = (2 - exp(-r) (r + 2))/r, T(0) = 1; the far field falls like 2/r (algebraic)
    p = bvpkit.Problem(["T'' + (2/r)*T' = -exp(-r)"], ["T'(0) = 0", "T(inf) = 0"], (0, "inf"), independent="r")
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    r = np.array([0.5, 1.0, 5.0, 20.0])
    assert sol.evaluate("T", at=r) == pytest.approx((2 - np.exp(-r) * (r + 2)) / r, abs=1e-8)
    assert sol.evaluate("T(0)") == pytest.approx(1.0, abs=1e-8)
