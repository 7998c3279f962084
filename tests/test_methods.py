"""Shooting, multiple shooting and the selector: checks against published and analytic values,
honest error estimates, and the same diagnostics from every method."""

import math

import numpy as np
import pytest
from catalogue import BLASIUS_FPP0, bratu, bratu_slope

import bvpkit
from bvpkit.methods import REGISTRY

METHODS = sorted(REGISTRY)
# Troesch, mu = 5: y'(0) = 4.575046e-2 (Roberts and Shipman 1976, J. Comput. Phys. 10, to 7
# digits). Our own high-accuracy runs (tol 1e-9) agree to 5e-12: collocation 0.0457504614065706,
# multiple shooting 0.0457504614063611.
TROESCH = 4.575046e-2


def troesch():
    return bvpkit.Problem(["y'' = mu*sinh(mu*y)"], ["y(0) = 0", "y(1) = 1"], (0, 1), constants={"mu": 5.0})


def test_troesch_auto_succeeds_and_matches_the_published_slope():
    sol = bvpkit.solve(troesch(), tol=1e-9)
    assert sol.success, sol.message
    assert sol.evaluate("y'(0)") == pytest.approx(TROESCH, rel=2e-7)  # Roberts and Shipman 1976


def test_troesch_multiple_shooting_succeeds_where_single_shooting_blows_up():
    multiple = bvpkit.solve(troesch(), tol=1e-9, method="multiple_shooting")
    assert multiple.success, multiple.message
    assert multiple.evaluate("y'(0)") == pytest.approx(TROESCH, rel=2e-7)  # Roberts and Shipman 1976
    single = bvpkit.solve(troesch(), tol=1e-9, method="single_shooting")
    if not single.success:  # the expected struggle: it must say what happened and where
        assert single.status is bvpkit.Status.INTEGRATION_FAILED
        assert "near x = " in single.message and "multiple_shooting" in single.message


@pytest.mark.parametrize("method", METHODS)
def test_blasius_by_every_method(method):
    sol = bvpkit.solve(bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"],
                                      (0, "inf"), independent="eta"), tol=1e-9, method=method)
    assert sol.success, sol.message
    assert sol.evaluate("f''(0)") == pytest.approx(BLASIUS_FPP0, rel=1e-9)  # Boyd 1999, Table 1


def test_blasius_methods_agree_with_each_other():
    p = bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"], (0, "inf"))
    values = [bvpkit.solve(p, tol=1e-9, method=m).evaluate("f'(1)") for m in METHODS]
    assert max(values) - min(values) < 3e-9


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("branch", ["lower", "upper"])
def test_bratu_branches_by_every_method(method, branch):
    guess = {"y": "16*x*(1-x)"} if branch == "upper" else None
    sol = bvpkit.solve(bratu(), tol=1e-8, method=method, guess=guess)
    assert sol.success, sol.message
    # analytic: y'(0) = t tanh(t/4), t = sqrt(2 lam) cosh(t/4)
    assert sol.evaluate("y'(0)") == pytest.approx(bratu_slope(1.0, branch), rel=1e-7)


@pytest.mark.parametrize("eps", [1e-1, 1e-2, 1e-3])
def test_boundary_layer_auto_succeeds_with_an_honest_estimate(eps):
    p = bvpkit.Problem(["eps*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1), constants={"eps": eps})
    sol = bvpkit.solve(p, tol=1e-6)
    assert sol.success, sol.message
    x = np.linspace(0, 1, 2001)
    exact = np.expm1(-x / eps) / np.expm1(-1 / eps)  # analytic: (1 - exp(-x/eps)) / (1 - exp(-1/eps))
    err = np.max(np.abs(sol.evaluate("y", at=x) - exact) / (1 + np.abs(exact)))
    assert err <= sol.diagnostics.error_estimate * 10
    assert sol.diagnostics.error_estimate <= 1e-6


# Problems with exact solutions that no method reproduces exactly (not polynomials):
# (problem, exact y as a function of x, source)
EXACT = [
    (lambda: bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y(3) = sin(3)"], (0, 3)),
     np.sin, "analytic: y = sin x"),
    (lambda: bvpkit.Problem(["y'' = y' + 2*y"], ["y(0) = 1", "y'(2) = 2*exp(4)"], (0, 2)),
     lambda x: np.exp(2 * x), "analytic: y = exp(2x)"),
    (lambda: bvpkit.Problem(["y'' = 2*y**3"], ["y(0) = 1", "y(1) = 1/2"], (0, 1)),
     lambda x: 1 / (1 + x), "analytic: y = 1/(1+x) solves y'' = 2 y^3"),
    (lambda: bvpkit.Problem(["0.05*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1)),
     lambda x: np.expm1(-x / 0.05) / np.expm1(-1 / 0.05), "analytic: boundary layer, eps = 0.05"),
]


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("index", range(len(EXACT)))
@pytest.mark.parametrize("tol", [1e-4, 1e-7])
def test_error_estimate_is_within_a_factor_ten_of_the_true_error(method, index, tol):
    make, exact, source = EXACT[index]
    sol = bvpkit.solve(make(), tol=tol, method=method)
    assert sol.success, sol.message
    x = np.concatenate([sol.x, 0.5 * (sol.x[1:] + sol.x[:-1])])
    true = np.max(np.abs(sol.evaluate("y", at=x) - exact(x)) / (1 + np.abs(exact(x))))
    estimate = sol.diagnostics.discretisation_error
    assert estimate >= 0.1 * true, (source, estimate, true)
    if true > 1e-12:  # below that, both are round-off
        assert estimate <= 10 * true, (source, estimate, true)


@pytest.mark.parametrize("method", METHODS)
def test_every_method_reports_the_same_diagnostics(method):
    sol = bvpkit.solve(bratu(), tol=1e-7, method=method)
    d = sol.diagnostics
    assert sol.method == method == d.method
    assert d.iterations >= 1 and d.mesh_nodes == sol.x.size
    for value in (d.max_residual, d.bc_residual, d.error_estimate, d.condition, d.seconds):
        assert math.isfinite(value)
    assert d.max_residual < 1e-5 and d.bc_residual < 1e-9
    assert 1 <= d.condition < 100  # Bratu's lower branch is well conditioned (common practice, no source)
    assert [a.method for a in d.attempts] == [method]


def test_selector_explains_layers_and_steep_growth():
    layer = bvpkit.solve(bvpkit.Problem(["1e-3*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1)))
    assert layer.diagnostics.selection.startswith("chose collocation: stiff")
    steep = bvpkit.solve(bvpkit.Problem(["y'' = 400*y"], ["y(0) = 0", "y(1) = 1"], (0, 1)), tol=1e-8)
    assert steep.success, steep.message
    # steep growth no longer sends the problem to shooting first: collocation's global Newton
    # matrix takes it, and it was the faster on the test set (benchmarks/testset.py)
    assert steep.diagnostics.selection.startswith("chose collocation: sensitivity grows by")
    # analytic: y = sinh(20 x) / sinh(20)
    assert steep.evaluate("y(1/2)") == pytest.approx(math.sinh(10) / math.sinh(20), rel=1e-7)
    assert "chose collocation" in steep.summary()


def test_auto_falls_back_and_records_every_attempt():
    p = bvpkit.Problem(["1e-4*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1))
    sol = bvpkit.solve(p, tol=1e-6, max_nodes=30)
    attempts = sol.diagnostics.attempts
    assert attempts[0].method == "collocation" and attempts[0].status == "mesh_limit"
    assert len(attempts) >= 2 and attempts[1].reason.startswith("fallback after collocation")
    assert sol.success == (attempts[-1].status == "solved")


def test_outputs_carry_error_estimates():
    p = bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y'(0) = 1"], (0, 2), outputs={"end": "y(2)"})
    sol = bvpkit.solve(p, tol=1e-6)
    err = abs(sol.outputs["end"] - math.sin(2))  # analytic: y = sin x
    assert sol.output_errors["end"] >= 0.1 * err
    assert "+/-" in sol.summary()


@pytest.mark.parametrize("problem", ["bratu", "chain"])
def test_stability_constant_is_the_same_from_collocation_and_multiple_shooting(problem):
    # common practice, no source: the constant is a property of the problem, not of the
    # method (each computes it from its own Newton matrix or final mesh)
    if problem == "bratu":
        p = bratu()
    else:
        p = bvpkit.Problem(["u'' = 2*u**2", "v'' = 2*v**2 - 2*u**2"],
                           ["u'(0) = 0", "u(1) = 1", "v'(0) = 0", "v(1) = 0.1"], (0, 1))
    values = [bvpkit.solve(p, method=m, tol=1e-8).diagnostics.condition for m in ("collocation", "multiple_shooting")]
    assert values[0] == pytest.approx(values[1], rel=0.05)


def _scipy_reference(case):
    """The same problem through scipy.integrate.solve_bvp (the reference implementation of
    the Lobatto IIIA collocation bvpkit runs on its own linear algebra)."""
    from scipy.integrate import solve_bvp

    if case == "bratu":
        f = lambda x, y: np.vstack([y[1], -np.exp(y[0])])  # noqa: E731
        bc = lambda a, b: np.array([a[0], b[0]])  # noqa: E731
        x = np.linspace(0, 1, 11)
        problem = bvpkit.Problem(["y'' + exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1))
    elif case == "blasius":
        f = lambda x, y: np.vstack([y[1], y[2], -0.5 * y[0] * y[2]])  # noqa: E731
        bc = lambda a, b: np.array([a[0], a[1], b[1] - 1])  # noqa: E731
        x = np.linspace(0, 10, 21)
        problem = bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", "f'(10) = 1"], (0, 10))
    else:  # a coupled pair with a condition joining both ends (the sparse LU path)
        f = lambda x, y: np.vstack([y[1], y[2] - y[0], y[3], -np.sin(y[0])])  # noqa: E731
        bc = lambda a, b: np.array([a[0] - 1, b[0] + a[2], a[3], b[2] - 0.5])  # noqa: E731
        x = np.linspace(0, 2, 11)
        problem = bvpkit.Problem(["u'' = v - u", "v'' = -sin(u)"],
                                 ["u(0) = 1", "u(2) = -v(0)", "v'(0) = 0", "v(2) = 0.5"], (0, 2))
    y = np.zeros((4 if case == "pair" else (3 if case == "blasius" else 2), x.size))
    if case == "blasius":
        y[1] = x / 10
    reference = solve_bvp(f, bc, x, y, tol=1e-9, max_nodes=100_000)
    assert reference.status == 0, reference.message
    return problem, reference


@pytest.mark.parametrize("case", ["bratu", "blasius", "pair"])
def test_collocation_matches_scipy_solve_bvp(case):
    problem, reference = _scipy_reference(case)
    sol = bvpkit.solve(problem, method="collocation", tol=1e-9)
    assert sol.success, sol.message
    points = np.linspace(reference.x[0], reference.x[-1], 57)
    ours = np.vstack([sol.evaluate(name, at=points) for name in sol.state_names])
    theirs = reference.sol(points)  # scipy.integrate.solve_bvp at tol 1e-9
    assert np.max(np.abs(ours - theirs) / (1 + np.abs(theirs))) < 1e-8


@pytest.mark.parametrize("equations, conditions, domain", [
    (["u'' = 2*u**2", "v'' = 2*v**2 - 2*u**2"], ["u'(0) = 0", "u(1) = 1", "v'(0) = 0", "v(1) = 0.1"], (0, 1)),
    (["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", "f'(10) = 1"], (0, 10)),
    (["0.01*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1)),
    (["y'''' = 1"], ["y(0) = 0", "y'(0) = 0", "y''(1) = 0", "y'''(1) = 0"], (0, 1)),
    (["y'' = 100*y"], ["y(0) = 1", "y(1) = 0"], (0, 1)),
])
def test_hager_estimate_of_the_stability_constant_equals_the_exact_norm(equations, conditions, domain, monkeypatch):
    # exact value: the inverse of the same Newton matrix, formed column by column
    from bvpkit.methods import diagnostics
    from bvpkit.methods.discrete import CollocationEquations

    sol = bvpkit.solve(bvpkit.Problem(equations, conditions, domain), method="collocation", tol=1e-6)
    view = sol.interpolant  # the standard form: mesh t, stacked states, parameters, constants
    eq = CollocationEquations(view.compiled, view.t, view.k)
    lu = eq.factor(view.y, view.p)
    monkeypatch.setattr(diagnostics, "_EXACT_INVERSE", 10**6)
    exact = diagnostics.stability_constant(lu, lu.size, eq.row_scale())
    monkeypatch.setattr(diagnostics, "_EXACT_INVERSE", 0)
    estimate = diagnostics.stability_constant(lu, lu.size, eq.row_scale())
    assert estimate == pytest.approx(exact, rel=1e-6)


# derivatives of the EXACT solutions above (analytic, differentiated by hand)
EXACT_SLOPES = [
    np.cos,
    lambda x: 2 * np.exp(2 * x),
    lambda x: -1 / (1 + x) ** 2,
    lambda x: -np.exp(-x / 0.05) / 0.05 / np.expm1(-1 / 0.05),
]


@pytest.mark.parametrize("index", range(len(EXACT)))
@pytest.mark.parametrize("tol", [1e-4, 1e-7])
def test_collocation_estimate_is_within_a_factor_two_of_the_error_of_every_state(index, tol):
    # the deferred-correction estimate measures the error of y and y' alike
    make, exact, source = EXACT[index]
    sol = bvpkit.solve(make(), tol=tol, method="collocation")
    assert sol.success, sol.message
    x = np.concatenate([sol.x, 0.5 * (sol.x[1:] + sol.x[:-1])])
    errors = [np.abs(sol.evaluate(name, at=x) - f(x)) / (1 + np.abs(f(x)))
              for name, f in (("y", exact), ("y'", EXACT_SLOPES[index]))]
    true = max(float(np.max(e)) for e in errors)
    estimate = sol.diagnostics.discretisation_error
    assert 0.5 * true <= estimate <= 2 * true, (source, estimate, true)


@pytest.mark.parametrize("eps, tol", [(1e-4, 1e-8), (1e-5, 1e-6)])
def test_collocation_refines_as_long_as_it_adds_nodes(eps, tol):
    # a layer of width eps needs many rounds of refinement (solve_bvp takes 11 and 12 here);
    # the estimate stays honest down in the layer
    p = bvpkit.Problem(["eps*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1), constants={"eps": eps})
    sol = bvpkit.solve(p, tol=tol, method="collocation")
    assert sol.success, sol.message
    x = np.unique(np.concatenate([sol.x, 0.5 * (sol.x[1:] + sol.x[:-1])]))
    exact = np.expm1(-x / eps) / np.expm1(-1 / eps)  # analytic: (1 - exp(-x/eps)) / (1 - exp(-1/eps))
    slope = -np.exp(-x / eps) / eps / np.expm1(-1 / eps)  # analytic: its derivative
    true = max(float(np.max(np.abs(sol.evaluate("y", at=x) - exact) / (1 + np.abs(exact)))),
               float(np.max(np.abs(sol.evaluate("y'", at=x) - slope) / (1 + np.abs(slope)))))
    assert 0.5 * true <= sol.diagnostics.error_estimate <= 2 * true


def _twin_layer_exact(x: np.ndarray, eps: float) -> np.ndarray:
    """Exact solution of eps y'' - x y' + y = 0, y(-1) = 1, y(1) = 2 (analytic, reduction of order):
    y = x/2 + (3/2) w(x)/w(1), w(x) = -exp(x^2/(2 eps)) + (x/eps) integral_0^x exp(t^2/(2 eps)) dt, the
    integral written through Dawson's function (scipy.special.dawsn) so nothing overflows."""
    from scipy.special import dawsn

    def g(z):  # w(z) exp(-z^2 / (2 eps))
        return -1.0 + z * np.sqrt(2.0 / eps) * dawsn(z / np.sqrt(2.0 * eps))

    return x / 2 + 1.5 * np.exp((x**2 - 1) / (2 * eps)) * g(x) / g(1.0)


@pytest.mark.parametrize(("method", "eps"), [
    pytest.param(method, eps, marks=pytest.mark.slow) if (method, eps) == ("multiple_shooting", 1e-3) else (method, eps)
    for method in ["auto", *sorted(REGISTRY)] for eps in [1e-2, 1e-3]
])  # multiple shooting at 1e-3 takes 7 s: with the slow tests (the default run has it at 1e-2)
def test_no_false_success_on_the_ill_conditioned_twin_layer_problem(method, eps):
    # A turning-point problem of the singular-perturbation test literature: its outer
    # solution x/2 is fixed by exponentially small terms, so its stability constant is about
    # exp(1/(2 eps)) and double precision cannot give 1e-7. Shooting once claimed success here
    # with an estimate of 1e-13 and a true error of 10.
    p = bvpkit.Problem(["eps*y'' - x*y' + y = 0"], ["y(-1) = 1", "y(1) = 2"], (-1, 1), constants={"eps": eps})
    tol = 1e-7
    sol = bvpkit.solve(p, tol=tol, method=method)
    if sol.success:
        x = np.linspace(-1, 1, 2001)
        exact = _twin_layer_exact(x, eps)
        true = np.max(np.abs(sol.evaluate("y", at=x) - exact) / (1 + np.abs(exact)))
        assert true <= 10 * tol, (sol.method, true, sol.diagnostics.error_estimate)
    else:
        assert sol.status.word in ("error_too_large", "not_converged", "integration_failed", "mesh_limit",
                                   "singular_jacobian", "non_finite", "truncation_not_converged")


def test_twin_layer_exact_solution_meets_its_equation():
    # the check value's own check: residual of the exact solution by finite differences
    eps, h = 1e-2, 1e-5
    x = np.linspace(-0.95, 0.95, 191)
    y = lambda z: _twin_layer_exact(z, eps)  # noqa: E731
    d1 = (y(x + h) - y(x - h)) / (2 * h)
    d2 = (y(x + h) - 2 * y(x) + y(x - h)) / h**2
    assert np.max(np.abs(eps * d2 - x * d1 + y(x))) < 1e-6
    assert _twin_layer_exact(np.array([-1.0, 1.0]), eps) == pytest.approx([1.0, 2.0], rel=1e-12)


@pytest.mark.parametrize("method", ["collocation", "multiple_shooting", "auto"])
def test_a_jacobian_that_is_infinite_on_the_guess_is_named_not_a_crash(method):
    # y'' = sqrt(y) with y(0) = 0: d sqrt(y)/dy is infinite where the condition puts y = 0.
    # Multiple shooting once stopped on "cannot convert float infinity to integer" and
    # collocation blamed the conditions ("Newton matrix is singular").
    p = bvpkit.Problem(["y'' = sqrt(y)"], ["y(0) = 0", "y(1) = 1"], (0, 1))
    sol = bvpkit.solve(p, method=method)
    assert not sol.success
    assert sol.status is bvpkit.Status.NON_FINITE, sol.message
    assert "not finite" in sol.message and "infinity to integer" not in sol.message
