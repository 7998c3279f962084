"""The fast paths of issue 15 give the same answers as the plain ones, and the sixth-order method
is as accurate as it claims (no timings here: those live in benchmarks/)."""

from __future__ import annotations

import math
import sys

import numpy as np
import pytest
import sympy as sp
from scipy.sparse import csc_matrix
from catalogue import (
    BLASIUS_FPP0,
    EI,
    L_FIN,
    M_FIN,
    L,
    Q,
    blasius,
    bratu,
    bratu_t,
    cantilever,
    fin,
    simply_supported,
)

import bvpkit
from bvpkit.methods.discrete import (
    CollocationEquations,
    SingularMatrix,
    block_matrix,
    factor_blocks,
    sparse_lu,
    sparse_pays,
)


# -- the banded embedding of every Newton matrix --------------------------------------------------
def _random_blocks(rng, k: int, n: int, n_p: int, kind: str):  # noqa: ANN001, ANN202
    left, right = rng.normal(size=(k - 1, n, n)), rng.normal(size=(k - 1, n, n))
    params = rng.normal(size=(k - 1, n, n_p)) if n_p else None
    rows = n + n_p
    a, b, dp = rng.normal(size=(rows, n)), rng.normal(size=(rows, n)), rng.normal(size=(rows, n_p))
    if kind == "separated":
        b[: rows // 2] = 0.0
        a[rows // 2:] = 0.0
    elif kind == "periodic":  # y(0) - y(1) = 0 for every state, then the rest
        a[:n], b[:n] = np.eye(n), -np.eye(n)
    return left, right, params, a, b, (dp if n_p else None)


@pytest.mark.parametrize("kind", ["separated", "mixed", "periodic"])
@pytest.mark.parametrize("n_p", [0, 2])
def test_the_banded_embedding_solves_the_matrix_and_its_transpose(kind, n_p):
    rng = np.random.default_rng(7)
    blocks = _random_blocks(rng, 6, 3, n_p, kind)
    scale = rng.uniform(0.5, 2.0, size=5 * 3 + 3 + n_p)
    dense = block_matrix(*blocks, scale).toarray()  # the one assembler, as SuperLU sees it
    b = rng.normal(size=(dense.shape[0], 2))
    for sparse_blocks in (False, True):
        lu = factor_blocks(*blocks, scale, sparse_blocks=sparse_blocks)
        assert lu.banded is not sparse_blocks
        # common practice, no source: a solve is checked by its residual
        assert np.abs(dense @ lu.solve(b) - b).max() < 1e-10
        assert np.abs(dense.T @ lu.solve(b[:, 0], trans="T") - b[:, 0]).max() < 1e-10


def test_a_singular_matrix_is_said_to_be_singular():
    from bvpkit.methods.discrete import SingularMatrix

    left = np.zeros((3, 2, 2))
    with pytest.raises(SingularMatrix, match="singular"):
        factor_blocks(left, left.copy(), None, np.eye(2), np.zeros((2, 2)), None)
    none = np.zeros((0, 2, 2))  # one block (single shooting): the conditions alone
    with pytest.raises(SingularMatrix, match="singular"):
        factor_blocks(none, none, None, np.array([[0.0, 1.0], [0.0, 0.0]]), np.array([[0.0, 0.0], [0.0, 1.0]]), None)
    lu = factor_blocks(none, none, None, np.array([[1.0, 2.0], [0.0, 0.0]]), np.array([[0.0, 0.0], [3.0, 1.0]]), None)
    # analytic: [[1, 2], [3, 1]] x = [5, 5] at x = (1, 2)
    assert lu.solve(np.array([5.0, 5.0])) == pytest.approx([1.0, 2.0])
    assert lu.solve(np.array([7.0, 4.0]), trans="T") == pytest.approx([1.0, 2.0])  # transposed: [[1, 3], [2, 1]]


def test_multipoint_and_parameter_problems_keep_their_answers():
    # two-span beam and a free end: non-separated conditions and parameters, now banded
    span = bvpkit.Problem(["EI*w'''' = -q"], ["w(0) = 0", "w''(0) = 0", "w(L) = 0", "EI*(w'''(L+) - w'''(L-)) = R",
                                              "w(2*L) = 0", "w''(2*L) = 0"], (0, "2*L"),
                          constants={"EI": 1215.0, "q": 600.0, "L": 0.8}, unknown_parameters={"R": 500.0})
    sol = bvpkit.solve(span, method="collocation", tol=1e-9)
    assert sol.success, sol.message
    # analytic: the middle support of a two-span continuous beam carries 5/4 q L (any handbook)
    assert sol.parameters["R"] == pytest.approx(1.25 * 600.0 * 0.8, rel=1e-8)
    free = bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y'(0) = 1", "y(s) = 1/2"], (0, "s"),
                          unknown_parameters={"s": 1.0})
    sol = bvpkit.solve(free, method="collocation", tol=1e-9)
    assert sol.parameters["s"] == pytest.approx(math.pi / 6, rel=1e-9)  # analytic: sin(s) = 1/2


def _chain(species: int) -> bvpkit.Problem:
    """A reacting chain (our own scenario), the one of the scale benchmark."""
    from benchmarks.scale import chain_problem

    return chain_problem(species)


def test_the_sparse_assembly_is_the_block_assembly():
    prepared = bvpkit.prepare(_chain(40))
    c = prepared.compiled
    assert sparse_pays(c.jac_pattern)  # 80 states coupled to their neighbours only
    scattered = np.random.default_rng(2).random((80, 80)) < 0.03
    assert not sparse_pays(scattered)  # couplings all over: SuperLU would fill the blocks in
    x = np.linspace(0, 1, 17)
    y = np.random.default_rng(1).uniform(0.2, 1.0, (c.n, x.size))
    eq = CollocationEquations(c, x, prepared.k())
    p = np.zeros(0)
    scale = eq.row_scale()
    assert np.abs(eq._sparse_matrix(y, p, None, scale).toarray() - eq.jacobian(eq.join(y, p), scale).toarray()).max() \
        < 1e-12


@pytest.mark.parametrize(("k", "n", "n_p", "n_bc"), [(1, 2, 0, 2), (1, 2, 1, 3), (2, 1, 0, 1), (6, 3, 2, 5)])
def test_the_block_matrix_is_the_sum_of_its_blocks_entry_by_entry(k, n, n_p, n_bc):
    # the compressed-column layout put in place of a COO conversion: compared with the blocks
    # added entry by entry into a dense matrix (one block: both boundary blocks on one block)
    rng = np.random.default_rng(k * 100 + n)
    left, right = rng.normal(size=(k - 1, n, n)), rng.normal(size=(k - 1, n, n))
    parameters = rng.normal(size=(k - 1, n, n_p)) if n_p else None
    a, b = rng.normal(size=(n_bc, n)), rng.normal(size=(n_bc, n))
    dp = rng.normal(size=(n_bc, n_p)) if n_p else None
    scale = rng.uniform(0.5, 2.0, (k - 1) * n + n_bc)
    dense = np.zeros(((k - 1) * n + n_bc, k * n + n_p))
    for j in range(k - 1):
        dense[j * n:(j + 1) * n, j * n:(j + 1) * n] += left[j]
        dense[j * n:(j + 1) * n, (j + 1) * n:(j + 2) * n] += right[j]
        if n_p:
            dense[j * n:(j + 1) * n, k * n:] += parameters[j]
    base = (k - 1) * n
    dense[base:, :n] += a
    dense[base:, (k - 1) * n:k * n] += b
    if n_p:
        dense[base:, k * n:] += dp
    matrix = block_matrix(left, right, parameters, a, b, dp, scale)
    assert np.abs(matrix.toarray() - scale[:, None] * dense).max() < 1e-14
    assert matrix.has_sorted_indices


def test_a_large_sparse_system_solves_alike_by_both_factorisations(monkeypatch):
    import bvpkit.methods.discrete as discrete

    prepared = bvpkit.prepare(_chain(25))
    monkeypatch.setattr(discrete, "sparse_pays", lambda pattern: True)
    sparse_sol = bvpkit.solve(prepared, method="collocation", tol=1e-8)
    monkeypatch.setattr(discrete, "sparse_pays", lambda pattern: False)
    banded_sol = bvpkit.solve(prepared, method="collocation", tol=1e-8)
    assert sparse_sol.success and banded_sol.success
    # common practice, no source: two factorisations of one matrix give one answer
    assert sparse_sol.evaluate("c1(0)") == pytest.approx(banded_sol.evaluate("c1(0)"), rel=1e-10)


# -- preparation ----------------------------------------------------------------------------------
def test_quick_derivatives_are_sympys():
    from bvpkit.programs.codegen import _quick_derivative

    x, y, k = sp.symbols("x y k", real=True)
    for e in (-k * x**2 + k * y**2, 3 * x * y, k * x ** sp.Rational(3, 2), 2 * x + 5, k / x**2, k * x**2 * y):
        for s in (x, y, k):
            quick = _quick_derivative(e, s)
            assert quick is not None and sp.simplify(quick - sp.diff(e, s)) == 0  # analytic: SymPy's own diff
    assert _quick_derivative(sp.exp(x), x) is None and _quick_derivative(x * sp.sin(y), y) is None


def test_equations_in_any_order_are_isolated_one_by_one():
    # the second equation written first, and its highest derivative not alone on a side
    p = bvpkit.Problem(["2*v'' - u = 0", "u'' + u = 0"], ["u(0) = 0", "u'(0) = 1", "v(0) = 0", "v'(0) = 0"], (0, 1))
    sol = bvpkit.solve(p, tol=1e-9)
    # analytic: u = sin x, v'' = sin(x)/2, v = (x - sin x)/2
    assert sol.evaluate("v(1)") == pytest.approx((1 - math.sin(1)) / 2, rel=1e-8)


# -- sweeps ---------------------------------------------------------------------------------------
def test_a_small_sweep_starts_no_workers(monkeypatch):
    import bvpkit.families.sweep  # noqa: F401

    module = sys.modules["bvpkit.families.sweep"]
    started = []
    monkeypatch.setattr(module, "_default_executor", lambda count: started.append(count))
    p = bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c'(1) = Bi*(1 - c(1))"], (0, 1),
                       independent="r", constants={"phi": 1.0, "Bi": 10.0})
    result = bvpkit.sweep(p, {"phi": [0.5, 1.0, 2.0]}, outputs=["3*c'(1)/phi**2"], tol=1e-8)
    assert result.success and started == []
    phi = np.array([0.5, 1.0, 2.0])
    f = phi / np.tanh(phi) - 1
    # analytic: effectiveness 3 f / (phi^2 (1 + f/Bi)), f = phi coth(phi) - 1
    assert result.column("3*c'(1)/phi**2") == pytest.approx(3 * f / (phi**2 * (1 + f / 10.0)), rel=1e-7)


# -- the sixth-order method -----------------------------------------------------------------------
def _exact_cases():
    """(name, problem, tol, exact states (x) -> array (n, len(x)), guess)."""
    t_low, t_up = bratu_t(1.0, "lower"), bratu_t(1.0, "upper")

    def bratu_states(t):  # analytic: y = -2 ln(cosh((x - 1/2) t/2) / cosh(t/4))
        return lambda x: np.vstack([-2 * np.log(np.cosh((x - 0.5) * t / 2) / np.cosh(t / 4)),
                                    -t * np.tanh((x - 0.5) * t / 2)])

    def cantilever_states(x):  # analytic: w = q x^2 (6 L^2 - 4 L x + x^2) / (24 EI)
        c = Q / (24 * EI)
        return np.vstack([c * x**2 * (6 * L**2 - 4 * L * x + x**2), c * (12 * L**2 * x - 12 * L * x**2 + 4 * x**3),
                          c * (12 * L**2 - 24 * L * x + 12 * x**2), c * (-24 * L + 24 * x)])

    def supported_states(x):  # analytic: w = q x (L^3 - 2 L x^2 + x^3) / (24 EI)
        c = Q / (24 * EI)
        return np.vstack([c * (L**3 * x - 2 * L * x**3 + x**4), c * (L**3 - 6 * L * x**2 + 4 * x**3),
                          c * (-12 * L * x + 12 * x**2), c * (-12 * L + 24 * x)])

    def fin_states(x):  # analytic: T = cosh(m (L - x)) / cosh(m L)
        return np.vstack([np.cosh(M_FIN * (L_FIN - x)), -M_FIN * np.sinh(M_FIN * (L_FIN - x))]) / np.cosh(M_FIN * L_FIN)

    return [("bratu_lower", bratu(), bratu_states(t_low), None),
            ("bratu_upper", bratu(), bratu_states(t_up), {"y": "16*x*(1-x)"}),
            ("cantilever", cantilever(), cantilever_states, None),
            ("simply_supported", simply_supported(), supported_states, None),
            ("fin", fin(), fin_states, None)]


@pytest.mark.parametrize("case", _exact_cases(), ids=lambda c: c[0])
@pytest.mark.parametrize("tol", [1e-6, 1e-9])
def test_the_sixth_order_estimate_is_within_ten_of_the_true_error(case, tol):
    name, problem, exact, guess = case
    sol = bvpkit.solve(problem, method="collocation6", tol=tol, guess=guess)
    assert sol.success, sol.message
    x = np.unique(np.concatenate([sol.x, 0.5 * (sol.x[1:] + sol.x[:-1]), np.linspace(sol.x[0], sol.x[-1], 301)]))
    names = sol.state_names
    values = np.vstack([sol.evaluate(s, at=x) for s in names])
    truth = exact(x)
    error = float(np.max(np.abs(values - truth) / (1 + np.abs(truth))))
    estimate = sol.diagnostics.error_estimate
    assert estimate <= tol
    assert estimate >= error / 10, (estimate, error)
    assert estimate <= 10 * error or error < 1e-13, (estimate, error)


def test_the_sixth_order_estimate_covers_blasius():
    sol = bvpkit.solve(blasius(), method="collocation6", tol=1e-9)
    assert sol.success, sol.message
    # Boyd 1999, SIAM Review 41(2), Table 1
    assert abs(sol.evaluate("f''(0)") - BLASIUS_FPP0) <= 10 * sol.diagnostics.error_estimate


def test_the_sixth_order_method_converges_at_order_six():
    from bvpkit.methods.collocation6 import _newton, _positions

    prepared = bvpkit.prepare(bratu())
    c, k = prepared.compiled, prepared.k()
    t = bratu_t(1.0, "upper")  # the upper branch: steep enough to stay above round-off on fine meshes
    errors, steps = [], []
    for m in (5, 9, 17, 33):
        x = np.linspace(0, 1, m)
        y = np.vstack([16 * x * (1 - x), np.zeros(m)])
        stages = _positions(x)
        z = np.stack([16 * stages * (1 - stages), np.zeros_like(stages)])
        solved = _newton(c, x, y, z, np.zeros(0), k, 1e-13)
        exact = -2 * np.log(np.cosh((x - 0.5) * t / 2) / np.cosh(t / 4))  # analytic
        errors.append(np.max(np.abs(solved.y[0] - exact)))
        steps.append(1.0 / (m - 1))
    order = np.polyfit(np.log(steps), np.log(errors), 1)[0]
    # superconvergence of Lobatto IIIA with 4 stages at the nodes: order 2s - 2 = 6
    # (Hairer and Wanner, Solving ODEs II, section IV.5)
    assert 5.6 < order < 6.6, (order, errors)


def test_the_sixth_order_defect_estimate_tracks_the_true_error_between_the_output_points():
    # the estimate that picks the next mesh without a second solve (it never accepts one) must
    # follow the true error of the interpolant a Solution evaluates, within a small factor
    from bvpkit.methods.collocation6 import _newton, _positions
    from bvpkit.methods.diagnostics import Hermite

    prepared = bvpkit.prepare(bratu())
    c, k = prepared.compiled, prepared.k()
    t = bratu_t(1.0, "upper")

    def exact(s):  # analytic: y = -2 log(cosh((x - 1/2) t/2) / cosh(t/4)), y' = -t tanh((x - 1/2) t/2)
        return np.vstack([-2 * np.log(np.cosh((s - 0.5) * t / 2) / np.cosh(t / 4)), -t * np.tanh((s - 0.5) * t / 2)])

    for m in (9, 17, 33):
        x = np.linspace(0, 1, m)
        y = np.vstack([16 * x * (1 - x), np.zeros(m)])
        stages = _positions(x)
        solved = _newton(c, x, y, np.stack([16 * stages * (1 - stages), np.zeros_like(stages)]), np.zeros(0), k, 1e-13)
        expected = solved.defect_estimate(c, k)
        xo, yo = solved.output()
        mid = 0.5 * (xo[1:] + xo[:-1])
        F = solved.slopes(c, k)
        slopes = np.empty_like(yo)
        slopes[:, ::3] = np.concatenate([F[:, :, 0], F[:, -1:, 3]], axis=1)
        slopes[:, 1::3], slopes[:, 2::3] = F[:, :, 1], F[:, :, 2]
        truth = exact(mid)
        error = np.max(np.abs(Hermite(xo, yo, slopes)(mid) - truth) / (1 + np.abs(truth)), axis=0)
        worst = np.max(error.reshape(m - 1, 3), axis=1)  # per interval of the mesh
        # measured 1.0-2.5 on every interval (m = 9, 17, 33): the leading-order terms hold here
        assert np.all((expected >= 0.5 * worst) & (expected <= 5 * worst)), (m, expected / worst)


def test_the_sixth_order_takes_a_guess_that_already_solves_the_problem():
    # the zero guess of y'' = 0 with zero ends is the answer (analytic:
    # y = 0); its residual is exactly zero, which the Newton iteration's contraction must take
    sol = bvpkit.solve(bvpkit.Problem(["y'' = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1)), method="collocation6", tol=1e-6)
    assert sol.success, sol.message
    assert np.max(np.abs(sol.evaluate("y", at=np.linspace(0, 1, 5)))) == 0.0


def test_a_sparse_lu_of_a_diverged_iterate_is_refused_before_superlu_sees_it(capfd):
    # entries of 1e162 (seen when a trace's corrector diverged): SuperLU's BLAS printed complaints
    # to standard output and then failed; refused first, quietly, as a singular matrix
    matrix = csc_matrix(np.array([[1.0, 2.0, 0.0], [1e162, 1.0, 3.0], [0.0, 4.0, 1e160]]))
    with pytest.raises(SingularMatrix, match="diverging iterate"):
        sparse_lu(matrix)
    assert capfd.readouterr().out == ""
    assert np.allclose(sparse_lu(csc_matrix(np.eye(3) * 2.0)).solve(np.ones(3)), 0.5)  # analytic
