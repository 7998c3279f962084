"""Eigenvalue problems: the eigenvalue an unknown parameter, the normalisation an added state.

An eigenvalue problem gives only its homogeneous conditions. The eigenvalue becomes an
unknown parameter, and the normalisation ``integral(sum of squares of the functions) = 1`` an
added state ``z' = sum of squares`` with ``z(a) = 0``, ``z(b) = 1``. The equations and
conditions must be linear and homogeneous in the functions and linear in the eigenvalue
(checked here). A solve from scratch starts from a discretised matrix eigenproblem
(:func:`eigen_guess`); a converged solution is checked for the mode asked for by the count of
interior zeros of the first function (or, when every mode keeps as many zeros, by the order
of the eigenvalues).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .._lazy import LazyModule
from ..errors import BvpkitError, ProblemError
from ..language.budget import budget
from ..status import Status
from .guess import fill_integrals, initial_mesh
from .transform import Transform, register

sp = LazyModule("sympy")

#: The added state that integrates the squares of the functions.
NORMALISATION = "integral of the squares (normalisation)"


@register
@dataclass(frozen=True)
class Eigenvalue(Transform):
    """The eigenvalue (parameter ``index``) of mode ``mode``, normalised."""

    kind = "eigenvalue"
    index: int = 0
    mode: int = 1

    # -- symbolic -------------------------------------------------------------------------
    @classmethod
    def applies(cls, problem) -> bool:  # noqa: ANN001
        return problem.eigenvalue is not None

    @classmethod
    def room(cls, problem) -> int:  # noqa: ANN001
        return 1

    @classmethod
    def names(cls, problem, names) -> None:  # noqa: ANN001
        names.parameters.append(problem.eigenvalue)

    @classmethod
    def states(cls, work) -> None:  # noqa: ANN001
        problem = work.problem
        lam = work.names.p[sp.Symbol(problem.eigenvalue)]
        users = len(work.user_states)
        for system in work.systems:
            with budget("checking that the eigenvalue problem is linear"):
                _check_linear(system[:users], work.local[:users], lam, problem)
        values = [work.local[i] for i, (_, order) in enumerate(work.states[:users]) if order == 0]
        work.scratch[cls.kind] = work.add_state(NORMALISATION,
                                                [sum(v**2 for v in values)] * len(work.systems))

    @classmethod
    def conditions(cls, work) -> None:  # noqa: ANN001
        for condition in work.given:
            _check_condition(work.problem, condition, work.names)
        z = work.scratch[cls.kind]
        work.conditions.append((work.value(z, 0, 1), "added"))
        work.conditions.append((work.value(z, work.last, -1) - 1, "added"))

    @classmethod
    def finish(cls, work) -> Eigenvalue:  # noqa: ANN001
        return cls(work.names.parameters.index(work.problem.eigenvalue), int(work.problem.mode))

    @classmethod
    def read(cls, fields) -> Eigenvalue:  # noqa: ANN001
        index, mode = fields.get("index"), fields.get("mode")
        if (set(fields) != {"index", "mode"} or any(isinstance(v, bool) or not isinstance(v, int) for v in (index, mode))
                or not (0 <= index < 10_000 and 1 <= mode <= 10_000)):
            raise ValueError("eigenvalue: a parameter index and a mode expected")
        return cls(index, mode)

    # -- numerical ------------------------------------------------------------------------
    def start(self, prepared, t, y, p, k, given: bool):  # noqa: ANN001, ANN201
        compiled = prepared.compiled
        layout = compiled.layout
        vectors, lam = eigen_guess(compiled, t, k, self.index, self.mode)
        if not given:
            y[layout.user_rows] = vectors[layout.user_rows]
        p[self.index] = lam
        fill_integrals(compiled, t, y, p, k)
        if not given:
            # the vectors are normalised in t; the normalisation holds in the user's variable
            # (dx = h dt): scaled so that it is met at the start
            total = float(y[layout.rows(layout.states.index((NORMALISATION, 0)))[-1], -1])
            if math.isfinite(total) and total > 0:
                y[layout.user_rows] /= math.sqrt(total)
                fill_integrals(compiled, t, y, p, k)
        return y, p

    def check(self, prepared, outcome, k):  # noqa: ANN001, ANN201
        """The mode found: by the interior zeros of the first function, or by the order of
        the eigenvalues when every mode keeps as many."""
        compiled = prepared.compiled
        layout = compiled.layout
        found = interior_zeros(first_function(layout, outcome.y))
        if found == self.mode - 1:
            return None
        if self._by_order(compiled, outcome, k):
            return (Status.SOLVED, f"every mode of {layout.functions[0][0]} keeps as many interior zeros, so mode "
                                   f"{self.mode} was told by the order of the eigenvalues")
        name = layout.functions[0][0]
        return (Status.OTHER_MODE,
                f"asked for mode {self.mode} ({self.mode - 1} interior zeros of {name}), but the solution found has "
                f"{found} interior zeros (mode {found + 1}); " + Status.OTHER_MODE.hint)

    def _by_order(self, compiled, outcome, k: np.ndarray) -> bool:  # noqa: ANN001
        """Whether the modes of this eigenvalue problem are told apart by the order of the
        eigenvalues alone (all with as many interior zeros), and the eigenvalue found is the
        ``mode``-th: the guess's eigenvalue within 5%."""
        report: dict = {}
        try:
            _, guessed = eigen_guess(compiled, initial_mesh(), k, self.index, self.mode, report)
        except (BvpkitError, ArithmeticError, ValueError, np.linalg.LinAlgError):
            return False
        found = float(outcome.p[self.index])
        return bool(report.get("by_order")) and abs(found - guessed) <= 0.05 * max(abs(found), 1e-300)


def _check_linear(rhs, s, lam, problem) -> None:  # noqa: ANN001
    """An eigenvalue problem must be linear and homogeneous, and linear in the eigenvalue."""
    name = problem.eigenvalue
    jac = sp.Matrix(rhs).jacobian(list(s))
    if any(jac.has(v) for v in s) or any(sp.simplify(r.xreplace({v: 0 for v in s})) != 0 for r in rhs):
        raise ProblemError(
            f"eigenvalue '{name}': the equations must be linear and homogeneous in the unknown "
            "functions (no terms without them, no products of them)"
        )
    if any(sp.simplify(sp.diff(entry, lam, 2)) != 0 for entry in jac):
        raise ProblemError(
            f"eigenvalue '{name}': the equations are not linear in the eigenvalue once solved for the highest "
            f"derivatives; write them so that it multiplies the functions, e.g. y'' + {name}*y = 0"
        )


def _check_condition(problem, condition, names) -> None:  # noqa: ANN001
    name = problem.eigenvalue
    lam = names.p[sp.Symbol(name)]
    ends = [s for s in condition.free_symbols if s.name.startswith("_v")]
    if sp.diff(condition, lam, 2) != 0:
        raise ProblemError(f"eigenvalue '{name}': the boundary conditions are not linear in it")
    zero = condition.xreplace({s: 0 for s in ends})
    if sp.simplify(zero) != 0 or any(sp.diff(condition, s, 2) != 0 for s in ends):
        raise ProblemError(
            f"eigenvalue '{name}': the conditions must be linear and homogeneous (= 0); bvpkit adds the "
            "normalisation itself"
        )


def interior_zeros(values: np.ndarray) -> int:
    """Sign changes of a sampled function, ignoring samples within round-off of zero."""
    scale = np.max(np.abs(values)) if values.size else 0.0
    signs = np.sign(values[np.abs(values) > 1e-8 * scale])
    return int(np.count_nonzero(signs[1:] != signs[:-1]))


def first_function(layout, y: np.ndarray) -> np.ndarray:  # noqa: ANN001
    """The values of the first unknown function along the whole domain, regions in order."""
    i = layout.index(layout.functions[0][0], 0)
    return np.concatenate([y[r] for r in layout.rows(i)])


def eigen_guess(compiled, t: np.ndarray, k: np.ndarray, which: int, mode: int,  # noqa: ANN001
                report: dict | None = None) -> tuple[np.ndarray, float]:
    """States ``Y`` (user rows filled) and eigenvalue of mode ``mode`` of a linear problem.

    ``report``, when given, gets ``by_order``: True when the modes found all had as many
    interior zeros, so the mode was told by the order of the eigenvalues.

    Solves the trapezoidal-rule discretisation of the standard form on a uniform mesh as a
    generalized matrix eigenproblem ``K v = lam L v`` (the equations are affine in the
    eigenvalue, so ``K`` and ``L`` come from the exact Jacobian at ``lam = 0`` and ``1``),
    and picks the eigenvector whose first unknown has ``mode - 1`` interior zeros, the
    smallest such eigenvalue in magnitude. A singular term enters through its limit at
    ``t = 0`` (the compiled Jacobian carries it).
    """
    import scipy.linalg

    layout = compiled.layout
    users = layout.user_rows
    u = len(users)
    nodes = max(121, 30 * mode + 1)
    s = np.linspace(0.0, 1.0, nodes)
    y0 = np.zeros((layout.n, nodes))
    p0 = np.zeros(len(layout.parameters))
    p1 = p0.copy()
    p1[which] = 1.0
    with np.errstate(all="ignore"):
        A = compiled.jac(s, y0, p0, k)[np.ix_(users, users)]
        B = compiled.jac(s, y0, p1, k)[np.ix_(users, users)] - A
        ba, bb, _ = compiled.bc_jac(y0[:, 0], y0[:, -1], p0, k)
        ba1, bb1, _ = compiled.bc_jac(y0[:, 0], y0[:, -1], p1, k)
    rows = [i for i, kind in enumerate(layout.condition_kinds) if kind != "added"]
    ba_lam, bb_lam = (ba1 - ba)[np.ix_(rows, users)], (bb1 - bb)[np.ix_(rows, users)]
    ba, bb = ba[np.ix_(rows, users)], bb[np.ix_(rows, users)]
    size = u * nodes
    K = np.zeros((size, size))
    L = np.zeros((size, size))
    h = np.diff(s)
    eye = np.eye(u)
    for i in range(nodes - 1):
        r = slice(i * u, (i + 1) * u)
        c0, c1 = slice(i * u, (i + 1) * u), slice((i + 1) * u, (i + 2) * u)
        K[r, c0] = -eye / h[i] - 0.5 * A[:, :, i]
        K[r, c1] = eye / h[i] - 0.5 * A[:, :, i + 1]
        L[r, c0] = 0.5 * B[:, :, i]
        L[r, c1] = 0.5 * B[:, :, i + 1]
    last = slice((nodes - 1) * u, size)
    K[last, :u] = ba
    K[last, size - u:] = bb
    L[last, :u] = -ba_lam  # conditions affine in the eigenvalue (a column's shear condition)
    L[last, size - u:] = -bb_lam
    first_rows = [users.index(row) for row in layout.rows(layout.index(layout.functions[0][0], 0))]

    def candidates_of(values: np.ndarray, vectors: np.ndarray) -> list:
        finite = np.isfinite(values) & (np.abs(values.imag) <= 1e-6 * (1 + np.abs(values.real)))
        found = []
        for lam, v in zip(values[finite].real, vectors[:, finite].T):
            v = v.real.reshape(nodes, u).T
            along = np.concatenate([v[i] for i in first_rows])
            if np.any(along):
                found.append((interior_zeros(along), abs(lam), lam, v))
        return found

    # the few eigenvalues nearest zero by shift-invert first (a sparse LU and a few products:
    # milliseconds, where the dense QZ of all of them took 0.4 s on a 4-state problem); all of
    # them when those do not hold the mode asked for
    wanted: list = []
    candidates = _nearest_eigenpairs(K, L, 2 * mode + 6, candidates_of)
    if candidates is not None:
        wanted = [c for c in candidates if c[0] == mode - 1]
    # when every mode found has as many zeros (the deflection of a column clamped at one end
    # and free at the other keeps one sign in every mode), the order of the eigenvalues is all
    # there is to go by, and the nearest ones are the ones to order
    silent = candidates is not None and len(candidates) >= mode and len({c[0] for c in candidates}) == 1
    if not wanted and not silent:
        values, vectors = scipy.linalg.eig(K, L)
        candidates = candidates_of(values, vectors)
    if not candidates:
        raise ProblemError("the discretised eigenproblem has no real eigenvalue; check the equations and conditions")
    wanted = [c for c in candidates if c[0] == mode - 1]
    if report is not None:
        report["by_order"] = not wanted and len({c[0] for c in candidates}) == 1
    pool = sorted(wanted or candidates, key=lambda c: c[1])
    _, _, lam, v = pool[0] if wanted else pool[min(mode - 1, len(pool) - 1)]
    value_rows = [j for j, row in enumerate(users) if layout.states[row % layout.region_size][1] == 0]
    norm = np.trapezoid(np.sum(v[value_rows] ** 2, axis=0), s)
    v = v / np.sqrt(norm) if norm > 0 else v
    along = np.concatenate([v[i] for i in first_rows])
    peak = np.argmax(np.abs(along[: max(2, along.size // (2 * mode))]))
    if along[peak] < 0:
        v = -v
    y = np.zeros((layout.n, t.size))
    for j, row in enumerate(users):
        y[row] = np.interp(t, s, v[j])
    return y, float(lam)


def _nearest_eigenpairs(K: np.ndarray, L: np.ndarray, count: int, candidates_of) -> list | None:  # noqa: ANN001
    """The ``count`` eigenpairs of ``K v = lam L v`` nearest zero (shift-invert of the standard
    problem ``K^-1 L v = v / lam``: the eigenvalues at infinity of a singular ``L`` map to
    zero and stay out of the way), through ``candidates_of``; None when it does not serve
    (``K`` singular, too small, ARPACK not converged)."""
    import scipy.sparse as sparse
    from scipy.sparse.linalg import ArpackError, ArpackNoConvergence, LinearOperator, eigs, splu

    size = K.shape[0]
    if count >= size - 2:
        return None
    Ls = sparse.csr_matrix(L)
    try:
        lu = splu(sparse.csc_matrix(K))
    except RuntimeError:
        return None
    op = LinearOperator((size, size), matvec=lambda x: lu.solve(Ls @ x), dtype=float)
    try:
        nu, vectors = eigs(op, k=count, which="LM", v0=np.ones(size), tol=1e-10)
    except (ArpackError, ArpackNoConvergence, ValueError):
        return None
    with np.errstate(divide="ignore", invalid="ignore"):
        values = np.where(nu != 0, 1.0 / nu, np.inf)
    return candidates_of(values, vectors)


