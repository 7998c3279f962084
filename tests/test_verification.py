"""bvpkit checked by its own verification tools: every method that claims success on a drawn
problem must be within its reported error estimate of the exact (manufactured) solution, and
must satisfy the original equations when they are re-evaluated independently."""

import numpy as np
import pytest
import sympy as sp
from hypothesis import given, settings

import bvpkit
from bvpkit.methods import REGISTRY
from bvpkit.testing import (
    VerificationError,
    assert_converges,
    assert_matches_exact,
    assert_methods_agree,
    assert_solves,
    linear_problems,
    manufactured_problems,
    scaled_examples,
    semi_infinite_problems,
)

METHODS = sorted(REGISTRY)


def _check_every_method(case, tol=1e-6):
    solved = 0
    for method in METHODS:
        sol = bvpkit.solve(case.problem, tol=tol, method=method)
        if not sol.success:
            continue  # a failure is allowed; a false claim of success is not
        solved += 1
        assert sol.diagnostics.error_estimate <= tol
        assert_matches_exact(sol, case)
        assert_solves(case.problem, sol)
    return solved


@settings(max_examples=scaled_examples(0.3))  # every example solves with every method
@given(linear_problems())
def test_linear_problems_orders_one_to_four(case):
    assert _check_every_method(case) >= 1, case.description


@settings(max_examples=scaled_examples(0.3))  # every example solves with every method
@given(manufactured_problems())
def test_nonlinear_manufactured_problems(case):
    assert _check_every_method(case) >= 1, case.description


@settings(max_examples=scaled_examples(0.3))  # every example solves with every method
@given(semi_infinite_problems())
def test_semi_infinite_problems_with_decaying_solutions(case):
    assert _check_every_method(case) >= 1, case.description


@given(linear_problems(orders=(4,)))
def test_fourth_order_draws_have_four_conditions_the_exact_solution_meets(case):
    p = case.problem
    assert p.orders == {"u": 4} and len(p.conditions) == 4
    assert case.description.count("clamped") + case.description.count("simply supported") == 2
    # each condition, as lhs - rhs, vanishes for the exact solution
    u = case.exact
    for c in p.conditions:
        swap = {pv.node: sp.diff(u, p.x, pv.order).subs(p.x, pv.point) for pv in p.point_values(c)}
        assert abs(float(c.xreplace(swap))) < 1e-12


@given(semi_infinite_problems())
def test_semi_infinite_draws_decay(case):
    assert case.problem.infinite == (False, True)
    assert abs(float(case(np.array([80.0]))[0])) < 1e-12


def test_robin_conditions_hold_for_the_exact_solution():
    from bvpkit.testing.strategies import X, _condition

    u = sp.exp(X) * sp.sin(X)
    for side, point in ((0, sp.Integer(0)), (1, sp.Integer(2))):
        condition, name = _condition(u, "robin", point, side, sp.Rational(3, 2))
        assert name == "Robin"
        sign = -1 if side == 0 else 1  # u' - alpha u on the left, u' + alpha u on the right
        expected = sp.diff(u, X).subs(X, point) + sign * sp.Rational(3, 2) * u.subs(X, point)
        assert sp.simplify(condition.rhs - expected) == 0


# -- the assertions fail when they should, naming the worst point and the size of the miss --
def _sine():
    return bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y(pi/2) = 1"], (0, "pi/2"))


def test_assert_solves_passes_a_good_solution_and_catches_a_wrong_one():
    p = _sine()
    sol = bvpkit.solve(p, tol=1e-8)
    assert assert_solves(p, sol) < 1e-6
    wrong = bvpkit.solve(bvpkit.Problem(["y'' + 1.1*y = 0"], ["y(0) = 0", "y(pi/2) = 1"], (0, "pi/2")), tol=1e-8)
    with pytest.raises(VerificationError, match=r"equation 1 \(y'' \+ y = 0\) misses by .* at x = "):
        assert_solves(p, wrong)


def test_assert_matches_exact_names_the_point_and_the_estimate():
    from bvpkit.testing import Manufactured

    p = _sine()
    x = p.x
    good = Manufactured(p, sp.sin(x), "y = sin x")  # analytic
    sol = bvpkit.solve(p, tol=1e-7)
    assert assert_matches_exact(sol, good) < 1e-7
    bad = Manufactured(p, sp.sin(x) + x * (x - sp.pi / 2) / 10, "not the solution")
    with pytest.raises(VerificationError, match=r"misses the exact solution by .* at x = .* estimated its error"):
        assert_matches_exact(sol, bad)


def test_assert_converges_fits_the_rate_of_error_control():
    eps = 1e-3
    p = bvpkit.Problem(["eps*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1), constants={"eps": eps})
    exact = -np.expm1(-0.5) / -np.expm1(-1 / eps)  # analytic: y = (1 - exp(-x/eps)) / (1 - exp(-1/eps))
    tols = (1e-3, 1e-4, 1e-5, 1e-6)
    slope = assert_converges(p, quantity="y(0.5*eps)", exact=exact, method="collocation", tols=tols)
    assert 0.5 <= slope <= 2.0
    with pytest.raises(VerificationError, match="slope"):
        assert_converges(p, quantity="y(0.5*eps)", exact=exact, method="collocation", tols=tols, slope=(3.0, 4.0))


def test_assert_methods_agree_on_bratu():
    p = bvpkit.Problem(["y'' + exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1))
    results = assert_methods_agree(p, quantities=["y'(0)", "y(1/2)"], tol=1e-8)
    assert set(results) == set(METHODS)


def test_importing_bvpkit_testing_imports_neither_pytest_nor_hypothesis():
    import subprocess
    import sys

    code = "import sys, bvpkit.testing; print('pytest' in sys.modules, 'hypothesis' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.stdout.split() == ["False", "False"], out.stderr
