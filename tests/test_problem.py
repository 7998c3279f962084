"""Validation of problems: every bad-input class gives a clear, specific error."""

import pytest
import sympy as sp

import bvpkit
from bvpkit import ExpressionError, OptionError, ProblemError


def make(equations=("y'' + y = 0",), conditions=("y(0) = 0", "y(1) = 1"), domain=(0, 1), **kw):
    return bvpkit.Problem(list(equations), list(conditions), domain, **kw)


def test_state_layout_is_readable_for_coupled_systems_of_different_orders():
    p = make(["f''' + f*f'' + g = 0", "g'' = f' * g"],
             ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1", "g(0) = 1", "g(inf) = 0"], (0, "inf"))
    layout = bvpkit.prepare(p).layout
    assert layout.state_names == ("f", "f'", "f''", "g", "g'")
    assert layout.row_names == ("f", "f'", "f''", "g", "g'")


def test_sympy_input_is_accepted():
    x = sp.Symbol("x")
    y = sp.Function("y")
    p = bvpkit.Problem([sp.Eq(y(x).diff(x, 2) + y(x), 0)], [y(0), sp.Eq(y(x).diff(x).subs(x, 0), 1)], (0, sp.pi / 2))
    sol = bvpkit.solve(p, tol=1e-9)
    assert sol.evaluate("y(pi/2)") == pytest.approx(1.0, rel=1e-8)  # analytic: y = sin x


@pytest.mark.parametrize(
    ("kwargs", "error", "message"),
    [
        (dict(conditions=["y(0) = 0"]), ProblemError, r"1 boundary condition\(s\) given, 2 needed \(2 for y\)"),
        (dict(conditions=["y(0) = 0", "y(1) = 1", "y'(0) = 0"]), ProblemError, "3 boundary condition"),
        (dict(conditions=["y(0) = 0", "y(3/2) = 1"]), ProblemError, r"x = 3/2 \(= 1.5\), .* lies outside the domain \[0, 1\]"),
        (dict(conditions=["y(0) = 0", "y(1/2-) = 1"]), ProblemError, r"3 needed .*1 at x = 1/2, where y jumps"),
        (dict(conditions=["y(0-) = 0", "y(1) = 1"]), ProblemError, "no value from the left there"),
        (dict(conditions=["y(0) = 0", "y(1/2) = 1", "y'(1/2-) = y'(1/2+) + 1", "y(1/2-) = 2"]), ProblemError,
         "ambiguous"),
        (dict(conditions=["y(0) = 0", "y''(1) = 1"]), ProblemError, "derivatives up to order 1"),
        (dict(conditions=["y(0) = 0", "y = 1"]), ProblemError, "point values such as f"),
        (dict(equations=["y'' + omega*y = 0"]), ProblemError, "unknown name 'omega'"),
        (dict(equations=["y'' + lamda*y = 0"], constants={"lambda_": 1.0}), ProblemError, "did you mean 'lambda_'"),
        (dict(equations=["y'' + lamb*y = 0"], constants={"lamb2": 1.0}), ProblemError, "did you mean 'lamb2'"),
        (dict(conditions=["z(0) = 0", "y(1) = 1"]), ProblemError, "'z' is not an unknown function"),
        (dict(equations=["y''**2 = 1 + y**2"]), ProblemError, "appear nonlinearly"),
        (dict(equations=["y = 1"]), ProblemError, "no unknown function found"),
        (dict(equations=["y'' + y = 0", "y' = 1"]), ProblemError, r"2 equation\(s\) in the equations for 1 unknown"),
        (dict(equations=["y'' + exq(y) = 0"]), ProblemError, "'exq' is not a known function .*did you mean 'exp'"),
        (dict(equations=["y'' + y = 0", "z' = y"]), ProblemError, r"3 needed \(2 for y \+ 1 for z\)"),
        (dict(domain=(1, 0)), ProblemError, "must have a < b"),
        (dict(domain=(0, "L")), ProblemError, "unknown name 'L'"),
        (dict(domain=(0,)), ProblemError, "must be a pair"),
        (dict(constants={"k": float("nan")}), ProblemError, "finite number"),
        (dict(constants={"pi": 3.0}), ExpressionError, "reserved"),
        (dict(guess={"z": "x"}), ProblemError, "not an unknown function"),
        (dict(guess={"y": "x + w"}), ProblemError, "unknown name 'w'"),
        (dict(independent="1x"), ExpressionError, "must start with a letter"),
        (dict(equations=["y'' + y = "]), ExpressionError, "equation 1: expression ends too early"),
        (dict(conditions=["y(0) = 0", "y(1) = 1 1"]), ExpressionError, "condition 2"),
    ],
)
def test_bad_problems_raise_specific_errors(kwargs, error, message):
    with pytest.raises(error, match=message):
        make(**kwargs)


def test_differential_algebraic_systems_are_refused_with_a_reason():
    with pytest.raises(ProblemError, match="differential-algebraic"):
        make(["f'' + g'' = 0", "2*f'' + 2*g'' = f"], ["f(0) = 0", "f(1) = 0", "g(0) = 0", "g(1) = 0"])


def test_every_error_is_a_bvpkit_error_and_a_value_error():
    with pytest.raises(bvpkit.BvpkitError):
        make(conditions=["y(0) = 0"])
    with pytest.raises(ValueError):
        make(conditions=["y(0) = 0"])


def test_options_are_checked():
    p = make()
    with pytest.raises(OptionError, match="unknown method 'colocation' .*did you mean 'collocation'"):
        bvpkit.solve(p, method="colocation")
    with pytest.raises(OptionError, match="tol must be"):
        bvpkit.solve(p, tol=-1)
    with pytest.raises(OptionError, match="max_nodes"):
        bvpkit.solve(p, max_nodes=2)
    with pytest.raises(OptionError, match="guess must be"):
        bvpkit.solve(p, guess=[1, 2])
    with pytest.raises(OptionError, match="takes a bvpkit.Problem"):
        bvpkit.solve("y'' = 0")


def test_evaluate_refuses_unknown_names_and_too_high_derivatives():
    sol = bvpkit.solve(make())
    with pytest.raises(ProblemError, match="unknown name 'q'"):
        sol.evaluate("q")
    with pytest.raises(ProblemError, match="order 2"):
        sol.evaluate("y'''(0)")


def test_default_guess_meets_linear_conditions():
    from bvpkit.reduce.guess import from_recipes, initial_mesh

    p = make(["y'' = y"], ["y(0) = 2", "y'(1) + y(1) = 3"])
    prepared = bvpkit.prepare(p)
    y = from_recipes(prepared.recipes, prepared.compiled, initial_mesh(), prepared.p0(), prepared.k())
    assert y[0, 0] == pytest.approx(2.0)
    assert y[1, -1] + y[0, -1] == pytest.approx(3.0)  # the Robin condition holds for the guess


def test_with_constants_changes_values_without_recompiling():
    p = make(["y'' = k*y"], ["y(0) = 1", "y(1) = 0"], constants={"k": 1.0})
    q = p.with_constants(k=4.0)
    assert bvpkit.prepare(q).compiled is bvpkit.prepare(p).compiled
    a, b = bvpkit.solve(p), bvpkit.solve(q)
    assert a.evaluate("y(1/2)") != pytest.approx(b.evaluate("y(1/2)"))
    with pytest.raises(ProblemError, match="not a constant"):
        p.with_constants(kk=1.0)
