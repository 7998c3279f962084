"""The fast paths of issue 25 give the answers of the plain ones (no timings here: those live in
benchmarks/): single shooting's point functions, Broyden updates and cheap error estimate;
the vectorised dense output; refinement by the predicted factor; the selector's cost model."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import bvpkit
from bvpkit.methods.diagnostics import _real_parts
from bvpkit.methods.collocation import _pieces, _split
from bvpkit.methods.variational import dense_values, point_system, subdivide

from catalogue import bratu, bratu_slope


def test_the_point_functions_are_the_mesh_functions_at_one_point():
    problem = bvpkit.Problem(["y'' + a*sin(y)*y' = b*x*p"], ["y(0) = 0", "y(1) = 1", "y'(0) = p"], (0, 1),
                             constants={"a": 0.7, "b": 1.3}, unknown_parameters={"p": 0.5})
    compiled = bvpkit.prepare(problem).compiled
    point = point_system(compiled)
    assert point is point_system(compiled)  # built once per system
    rng = np.random.default_rng(3)
    k = np.array([0.7, 1.3])
    for _ in range(3):
        x, y, p = float(rng.uniform()), rng.normal(size=compiled.n), rng.normal(size=compiled.n_parameters)
        np.testing.assert_array_equal(point.rhs(x, y, p, k), compiled.rhs(np.array([x]), y[:, None], p, k)[:, 0])
        np.testing.assert_array_equal(point.jac(x, y, p, k), compiled.jac(np.array([x]), y[:, None], p, k)[:, :, 0])
        np.testing.assert_array_equal(point.pjac(x, y, p, k),
                                      compiled.pjac(np.array([x]), y[:, None], p, k)[:, :, 0])


def test_the_vectorised_dense_output_is_scipys():
    # reference: SciPy's own OdeSolution, step by step
    result = solve_ivp(lambda t, y: [y[1], -np.cos(t) * y[0]], (0.0, 6.0), [1.0, 0.0], method="DOP853",
                       rtol=1e-9, dense_output=True)
    t = np.concatenate([np.linspace(0.0, 6.0, 97), result.t])
    np.testing.assert_allclose(dense_values(result.sol, t), result.sol(t), rtol=0, atol=1e-14)


def test_subdivide_cuts_each_interval_by_its_factor():
    x = np.array([0.0, 1.0, 3.0, 4.0])
    out = subdivide(x, np.array([True, False, True]), np.array([2.9, 5.0, 1.2]))
    # common practice, no source: ceil(1.05 factor) parts, at least 2, old nodes kept
    np.testing.assert_allclose(out, [0.0, 1 / 4, 2 / 4, 3 / 4, 1.0, 3.0, 3.5, 4.0])


def test_collocation_cuts_by_the_predicted_factor():
    tol = 1e-6
    residual = np.array([0.5e-6, 2e-6, 1e-3, 1e3])
    pieces = _pieces(residual, tol)
    assert pieces[0] == 1 and pieces[1] >= 2  # under the tolerance: left alone; over it: at least halved
    assert pieces[2] > pieces[1] and pieces[3] == 8  # more for a larger miss, at most 8
    x = np.array([0.0, 0.5, 1.0])
    np.testing.assert_allclose(_split(x, np.array([1, 3])), [0.0, 0.5, 2 / 3, 5 / 6, 1.0])


@pytest.mark.parametrize("n", [1, 2, 3])
def test_real_parts_of_eigenvalues_match_lapack(n):
    matrices = np.random.default_rng(n).normal(size=(40, n, n))
    mine = np.sort(_real_parts(matrices), axis=1)
    theirs = np.sort(np.linalg.eigvals(matrices).real, axis=1)  # reference: LAPACK through NumPy
    np.testing.assert_allclose(mine, theirs, atol=1e-12)


def test_single_shooting_with_broyden_updates_meets_its_tolerance():
    # analytic: Bratu's lower branch, y'(0) = t tanh(t/4)
    exact = bratu_slope(1.0, "lower")
    for tol in (1e-6, 1e-9):
        sol = bvpkit.solve(bratu(), method="single_shooting", tol=tol)
        assert sol.success, sol.message
        assert abs(sol.evaluate("y'(0)") - exact) <= 10 * tol * (1 + abs(exact))
        estimate = sol.diagnostics.error_estimate
        assert estimate is not None and 0 < estimate <= tol


def test_single_shooting_with_a_parameter_and_the_estimate_on_the_halved_mesh():
    # analytic: y'' = -p^2 y, y(0) = 0, y'(0) = 1, y(1) = 0 has p = pi (the first eigenvalue)
    problem = bvpkit.Problem(["y'' = -p**2*y"], ["y(0) = 0", "y'(0) = 1", "y(1) = 0"], (0, 1),
                             unknown_parameters={"p": 3.0}, guess={"y": "sin(3*x)/3"})
    sol = bvpkit.solve(problem, method="single_shooting", tol=1e-8)
    assert sol.success, sol.message
    assert sol.parameters["p"] == pytest.approx(math.pi, rel=1e-7)


def test_single_shooting_still_says_where_it_blew_up():
    problem = bvpkit.Problem(["y'' = y**3"], ["y(0) = 1", "y(1) = 0"], (0, 1), guess={"y": "1 + 40*x"})
    sol = bvpkit.solve(problem, method="single_shooting", tol=1e-6)
    assert not sol.success
    assert "x = " in sol.message and ("blew up" in sol.message or "NaN or inf" in sol.message
                                      or "collapsed" in sol.message or "could not reduce" in sol.message)


def test_auto_picks_the_sixth_order_only_where_its_cost_model_says_it_pays():
    problem = bratu()
    loose = bvpkit.solve(problem, tol=1e-8)
    assert loose.method == "collocation"
    tight = bvpkit.solve(problem, tol=1e-12)
    assert tight.method == "collocation6", tight.summary()
    assert "work" in tight.summary() and "tight" in tight.summary()
    # analytic: t tanh(t/4)
    assert tight.evaluate("y'(0)") == pytest.approx(bratu_slope(1.0, "lower"), rel=1e-10)
    # a stiff problem keeps the adaptive 4th order whatever the tolerance
    layer = bvpkit.Problem(["eps*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1), constants={"eps": 1e-3})
    from bvpkit.solver import strategy
    from bvpkit.methods.base import Trial

    compiled = bvpkit.prepare(layer).compiled
    x = np.linspace(0, 1, 41)
    trial = Trial(compiled, x, np.vstack([x, np.ones_like(x)]), np.zeros(0), np.array([1e-3]), 1e-12)
    assert strategy.plan(trial).steps[0].name == "collocation"


# -- many points of a sweep in one Newton system -----------------------------------------------------
def _fin():
    return bvpkit.Problem(["T'' = m**2*T"], ["T(0) = 1", "T'(1) + H*T(1) = 0"], (0, 1),
                          constants={"m": 1.0, "H": 1.0}, outputs={"slope": "T'(0)"})


def _fin_slope(m: float, h: float) -> float:
    # analytic: theta = cosh(m(1-x)) + (H/m) sinh(m(1-x)), normalised
    return -m * (math.sinh(m) + h / m * math.cosh(m)) / (math.cosh(m) + h / m * math.sinh(m))


def test_points_solved_together_are_what_each_solve_alone_gives():
    from bvpkit.families import batched

    prepared = bvpkit.prepare(_fin())
    assert batched.applies(prepared, {})
    first = bvpkit.solve(prepared.with_constants(m=1.0, H=0.5), tol=1e-8)
    points = [{"m": m, "H": 0.5} for m in np.linspace(1.5, 9.0, 9)]
    together = batched.solve_points(prepared, points, first, {"tol": 1e-8})
    assert all(sol is not None for sol in together)  # the joint refinement reaches every point
    for point, sol in zip(points, together):
        alone = bvpkit.solve(prepared.with_constants(**point), tol=1e-8)
        assert sol.status.word == alone.status.word == "solved"
        assert sol.method == "collocation" and sol.message.startswith("converged in ")
        exact = _fin_slope(point["m"], point["H"])
        assert abs(sol.outputs["slope"] - exact) <= 1e-7 * abs(exact)
        assert 0 < sol.diagnostics.error_estimate <= 1e-8
        # the stability constant of its own block, as a solve alone computes it (meshes differ a little)
        assert sol.diagnostics.condition == pytest.approx(alone.diagnostics.condition, rel=0.05)


def test_a_point_the_batch_cannot_settle_is_left_to_be_solved_alone():
    from bvpkit.families import batched

    problem = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 1.0},
                             outputs={"slope": "y'(0)"}, settings={"homotopy": "off"})  # a quick failure alone
    prepared = bvpkit.prepare(problem)
    first = bvpkit.solve(prepared, tol=1e-6)
    # lam = 3.6 is past the fold (3.5138, Bratu's critical value): no solution, the batch leaves it
    together = batched.solve_points(prepared, [{"lam": 1.2}, {"lam": 3.6}, {"lam": 1.4}], first, {})
    assert together[1] is None and together[0] is not None and together[2] is not None
    # analytic: t tanh(t/4) on the lower branch
    assert together[2].outputs["slope"] == pytest.approx(bratu_slope(1.4, "lower"), rel=1e-5)
    # and in a sweep that point is still reported as a failure of its own
    result = bvpkit.sweep(problem, {"lam": [1.0, 1.2, 3.6, 1.4]}, workers=1)
    rows = {row["lam"]: row for row in result.table}
    assert not rows[3.6]["success"] and rows[1.4]["success"] and rows[1.2]["success"]


def test_a_singular_term_is_taken_by_the_batch():
    from bvpkit.families import batched

    # the pellet of tests/test_sweep.py: c'' + (2/r) c' = phi^2 c, analytic effectiveness
    problem = bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c'(1) = Bi*(1 - c(1))"], (0, 1),
                             independent="r", constants={"phi": 1.0, "Bi": 10.0},
                             outputs={"effectiveness": "3*c'(1)/phi**2"})
    prepared = bvpkit.prepare(problem)
    first = bvpkit.solve(prepared, tol=1e-8)
    phis = [1.5, 3.0, 6.0]
    together = batched.solve_points(prepared, [{"phi": p, "Bi": 10.0} for p in phis], first, {"tol": 1e-8})
    for phi, sol in zip(phis, together):
        f = phi / math.tanh(phi) - 1  # analytic: 3 f / (phi^2 (1 + f/Bi)), f = phi coth(phi) - 1
        assert sol is not None and sol.outputs["effectiveness"] == pytest.approx(3 * f / (phi**2 * (1 + f / 10)),
                                                                                 rel=1e-7)


def test_the_batch_declines_what_it_does_not_take():
    from bvpkit.families import batched

    with_parameter = bvpkit.Problem(["y'' = -p**2*y"], ["y(0) = 0", "y'(0) = 1", "y(1) = 0"], (0, 1),
                                    unknown_parameters={"p": 3.0})
    periodic = bvpkit.Problem(["y'' = -y + a"], ["y(0) = y(1)", "y'(0) = y'(1)"], (0, 1), constants={"a": 1.0})
    assert not batched.applies(bvpkit.prepare(with_parameter), {})
    assert not batched.applies(bvpkit.prepare(periodic), {})
    assert not batched.applies(bvpkit.prepare(_fin()), {"method": "single_shooting"})
