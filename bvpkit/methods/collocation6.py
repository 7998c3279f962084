"""Sixth-order collocation: 4-stage Lobatto IIIA, error controlled against the halved mesh.

The method (Hairer and Wanner, *Solving Ordinary Differential Equations II*, section IV.5,
Lobatto IIIA with s = 4; Ascher, Mattheij and Russell 1995, *Numerical Solution of Boundary
Value Problems for ODEs*, section 5.5 on collocation at Lobatto points): on each interval
``[x_i, x_i + h]`` the solution is the polynomial of degree 4 through ``y_i`` whose slope
meets the equations at the four Lobatto points ``c = 0, (5 - sqrt 5)/10, (5 + sqrt 5)/10,
1``; with the stage values ``Y_j`` (``Y_1 = y_i``, ``Y_4 = y_i+1``):
``Y_j = y_i + h sum_l a_jl f(Y_l)``, ``a_jl`` the integrals of the Lagrange basis on ``c``
(``A`` below, built from that definition). Superconvergent at the nodes: order 6.

Newton's method on the nodes, the two interior stages and the parameters; the stages are
eliminated interval by interval (batched dense solves, no Python work per interval), which
leaves the bordered block-bidiagonal matrix of 4th-order collocation for the nodes,
factored by :func:`bvpkit.methods.discrete.factor_blocks`; while Newton's method contracts
fast, simplified steps reuse those factors.

Error control and estimate: a solve whose own defect estimate (the C1 cubic a ``Solution``
evaluates against the collocation polynomial, and the polynomial's error from its defect at
the interval midpoints) is far above the tolerance is refined by it at once; a solve expected
to pass is repeated on the halved mesh, and their difference, at the output points and between
them (through the C1 cubic interpolant), estimates the error of the coarser one, which is the
one returned (so the estimate is that of the answer given, not a guess at a better one). Only
that comparison accepts an answer. Intervals whose share misses the tolerance are split by the
factor the method's order predicts. The output holds
the nodes and the interior Lobatto points, so the cubic interpolant between them keeps up
with the method's accuracy.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from ..language.options import TOL_FLOOR
from ..status import Status
from .base import Method, Outcome, Trial
from .diagnostics import Hermite, stability_constant
from .discrete import SingularMatrix, factor_blocks, one_blas_thread
from .features import seeded

_ROOT5 = math.sqrt(5.0)
_C = np.array([0.0, (5 - _ROOT5) / 10, (5 + _ROOT5) / 10, 1.0])


def _lagrange_integrals(c: np.ndarray, theta: np.ndarray) -> np.ndarray:
    """``W[t, j] = integral from 0 to theta_t of the Lagrange basis polynomial j on the points c``."""
    out = np.empty((theta.size, c.size))
    for j in range(c.size):
        others = np.delete(c, j)
        basis = np.poly1d(np.poly(others)) / np.prod(c[j] - others)
        out[:, j] = np.polyint(basis)(theta)
    return out


_A = _lagrange_integrals(_C, _C)  # Lobatto IIIA: A[j, l] = integral_0^{c_j} L_l (first row zero)
# W_j(theta) = integral_0^theta L_j as polynomials: W = [theta^0 .. theta^4] @ _W
_W = np.linalg.solve(np.vander(np.linspace(0, 1, 5), 5, increasing=True),
                     _lagrange_integrals(_C, np.linspace(0, 1, 5)))
_B = _A[-1]  # 1/12, 5/12, 5/12, 1/12
# the midpoints of the three pieces an interval's output points cut it into, and the middle
_PIECE_MIDS = np.array([0.5 * _C[1], 0.5, 0.5 * (_C[2] + 1.0)])
_W_MIDS = np.vander(_PIECE_MIDS, 5, increasing=True) @ _W  # (3, 4): W_j at those points
_L_MID = (np.vander([0.5], 4, increasing=True) * np.arange(1, 5)) @ _W[1:]  # (1, 4): L_j(1/2)
_MAX_NEWTON = 16
# Simplified Newton steps (the last factors kept) are taken while the contraction seen promises
# convergence within this many of them: a simplified step costs a residual and batched products,
# about 0.4 of a full one (Blasius, 21 to 453 intervals), but converges only linearly.
_REUSE_STEPS = 2
_MAX_ROUNDS = 12
_SAFETY = 0.5  # a round is accepted at this share of the tolerance
_AIM = 0.1  # ... and a refinement aims at this share: one more node now is cheaper than one more round
_MAX_SPLIT = 8  # an interval is cut into at most this many pieces per round
_REUSE = 0.5  # share of intervals to be halved above which the halved mesh (solved already) is taken
# The first mesh: 20 intervals serve tol = 1e-6; a tighter tolerance starts on the intervals
# the order predicts (at 1e-12 a first round on 20 intervals was wasted work).
_FIRST_NODES, _FIRST_TOL = 20, 1e-6
_ORDER = 5  # exponent of the split prediction: the nodes converge at 6, the interpolant between them at 5
# The defect estimate of a round (:meth:`_Discrete.defect_estimate`): the defect of the
# collocation polynomial at an interval's midpoint is ``d = -h**4 y5 w(1/2) / 24`` to leading
# order (``w`` the node polynomial of c, ``y5`` the fifth derivative), and the polynomial's error
# ``h**5 y5 / 24 * integral_0^theta w``, so the error is at most ``_DEFECT_GAIN * h * |d|``:
_OMEGA = np.poly1d(np.poly(_C))
_DEFECT_GAIN = float(np.max(np.abs(np.polyint(_OMEGA)(np.linspace(0, 1, 1001)))) / abs(_OMEGA(0.5)))  # 0.143
# The estimate stands for the error of the polynomials only where the Jacobian changes the
# error little across an interval (h |J| below this); on a stiff mesh every round is checked
# against the halved mesh, as before.
_SMOOTH = 10.0


def _positions(x: np.ndarray) -> np.ndarray:
    """The interior stage points ``(m-1, 2)`` of the mesh ``x``."""
    return x[:-1, None] + np.diff(x)[:, None] * _C[None, 1:3]


def _output_mesh(x: np.ndarray) -> np.ndarray:
    """Nodes and interior Lobatto points, in order: ``3 (m-1) + 1`` points."""
    out = np.empty(3 * (x.size - 1) + 1)
    out[::3] = x
    stages = _positions(x)
    out[1::3], out[2::3] = stages[:, 0], stages[:, 1]
    return out


@dataclass
class _Discrete:
    """A converged solve on one mesh: nodes ``y (n, m)``, stages ``Z (n, m-1, 2)``, parameters."""
    x: np.ndarray
    y: np.ndarray
    z: np.ndarray
    p: np.ndarray
    iterations: int
    lu: object = None  # the last Newton matrix, factored (rows in derivative units)
    scale: np.ndarray | None = None
    reach: float = math.inf  # the largest h |J| (row sums) over the intervals, from the last Newton matrix
    _slopes: np.ndarray | None = dataclasses.field(default=None, repr=False)

    def output(self) -> tuple[np.ndarray, np.ndarray]:
        """The solution at the nodes and interior Lobatto points."""
        n, m = self.y.shape
        y = np.empty((n, 3 * (m - 1) + 1))
        y[:, ::3] = self.y
        y[:, 1::3], y[:, 2::3] = self.z[:, :, 0], self.z[:, :, 1]
        return _output_mesh(self.x), y

    def at(self, compiled, points: np.ndarray, k: np.ndarray) -> np.ndarray:  # noqa: ANN001
        """The collocation polynomials (degree 4) at ``points``: ``u(x_i + theta h) = y_i +
        h sum_j W_j(theta) f(Y_j)``."""
        x, h = self.x, np.diff(self.x)
        i = np.clip(np.searchsorted(x, points, side="right") - 1, 0, x.size - 2)
        theta = (points - x[i]) / h[i]
        W = np.vander(theta, 5, increasing=True) @ _W  # (points, 4)
        F = self.slopes(compiled, k)  # (n, m-1, 4)
        return self.y[:, i] + h[i] * np.einsum("nij,ij->ni", F[:, i, :], W)

    def defect_estimate(self, compiled, k: np.ndarray) -> np.ndarray:  # noqa: ANN001
        """Per interval, the largest relative error of the output expected from this solve
        alone, ``(m-1,)``: the C1 cubic through the output points against the collocation
        polynomial at the middles of its three pieces, plus the polynomial's own error from its
        defect ``u' - f(x, u)`` at the interval's midpoint (``_DEFECT_GAIN h |d|``, leading
        order). It chooses the next mesh without solving the halved one; it never accepts one."""
        h = np.diff(self.x)
        F = self.slopes(compiled, k)  # (n, m-1, 4)
        left = self.y[:, :-1, None]
        u = left + h[None, :, None] * np.einsum("nij,sj->nis", F, _W_MIDS)  # (n, m-1, 3)
        values = np.concatenate([left, self.z, self.y[:, 1:, None]], axis=2)  # at the output points
        widths = h[None, :, None] * np.diff(_C)[None, None, :]
        cubic = 0.5 * (values[:, :, 1:] + values[:, :, :-1]) + widths / 8 * (F[:, :, :-1] - F[:, :, 1:])
        size = 1 + np.abs(u)
        between = np.max(np.abs(cubic - u) / size, axis=(0, 2))
        slope = np.einsum("nij,j->ni", F, _L_MID[0])  # u' at the midpoints
        defect = slope - compiled.rhs(self.x[:-1] + 0.5 * h, u[:, :, 1], self.p, k)
        return between + _DEFECT_GAIN * h * np.max(np.abs(defect) / size[:, :, 1], axis=0)

    def slopes(self, compiled, k: np.ndarray) -> np.ndarray:  # noqa: ANN001
        """``f`` at the four Lobatto points of every interval, ``(n, m-1, 4)`` (computed once)."""
        if self._slopes is None:
            self._slopes = self._evaluate_slopes(compiled, k)
        return self._slopes

    def _evaluate_slopes(self, compiled, k: np.ndarray) -> np.ndarray:  # noqa: ANN001
        n, m = self.y.shape
        f_nodes = compiled.rhs(self.x, self.y, self.p, k)
        f_stages = compiled.rhs(_positions(self.x).ravel(), self.z.reshape(n, -1), self.p, k).reshape(n, m - 1, 2)
        return np.concatenate([f_nodes[:, :-1, None], f_stages, f_nodes[:, 1:, None]], axis=2)


def _newton(compiled, x: np.ndarray, y: np.ndarray, z: np.ndarray, p: np.ndarray, k: np.ndarray,  # noqa: ANN001
            tol: float) -> _Discrete:
    """Damped Newton on the 4-stage Lobatto IIIA equations of one mesh, stages condensed.

    Each full iteration forms the Jacobians at the nodes and stages in one call, inverts the
    ``2n x 2n`` stage blocks of all intervals in one batched call and factors the condensed
    node system (:func:`factor_blocks`). While the contraction seen (of the residual after a
    full step, of the steps after a simplified one) promises a step below the threshold within
    ``_REUSE_STEPS`` steps, the next step reuses those factors (a simplified Newton step: a
    residual, batched products and a solve with the factors kept); a simplified step that does
    not lower the residual is discarded and the matrix formed afresh. A solve ends on a
    full-length step below the threshold, a full Newton step or a simplified one that at least
    halved the step before it, so the step bounds the error left.

    Raises :class:`SingularMatrix` on a singular matrix, ``ArithmeticError`` when it does not
    converge.
    """
    n, m = y.shape
    n_p = p.size
    h = np.diff(x)
    points = np.concatenate([x, _positions(x).ravel()])  # the nodes, then the stages interval by interval
    threshold = max(1e-2 * tol, 1e-13)
    scale = np.concatenate([np.repeat(1.0 / h, n), np.ones(n + n_p)])
    eye2 = np.eye(2 * n)
    eye = np.eye(n)
    hA = h[:, None, None] * _A[None, 1:3, :]  # (m-1, 2, 4): h a_sl for the two interior stages
    hB = h[:, None] * _B[None, :]  # (m-1, 4)
    width = 2 * n + n_p + 1  # columns of the condensed blocks: y_i, y_i+1, p, the residual

    def values(y, z):  # noqa: ANN001, ANN202 - states at every point, in the order of ``points``
        return np.concatenate([y, z.reshape(n, -1)], axis=1)

    def residual(y, z, p):  # noqa: ANN001, ANN202
        f = compiled.rhs(points, values(y, z), p, k)
        fs = f[:, m:].reshape(n, m - 1, 2)
        F = np.stack([f[:, :m - 1], fs[:, :, 0], fs[:, :, 1], f[:, 1:m]], axis=2)  # (n, m-1, 4)
        gs = z - y[:, :-1, None] - np.einsum("nij,isj->nis", F, hA)  # (n, m-1, 2)
        ge = y[:, 1:] - y[:, :-1] - np.einsum("nij,ij->ni", F, hB)  # (n, m-1)
        return gs, ge, compiled.bc(y[:, 0], y[:, -1], p, k)

    def size(gs, ge, bc):  # noqa: ANN001, ANN202 - residuals in derivative units
        return max(float(np.max(np.abs(gs) / h[None, :, None])), float(np.max(np.abs(ge) / h)),
                   float(np.max(np.abs(bc), initial=0.0)))

    gs, ge, bc = residual(y, z, p)
    norm = size(gs, ge, bc)
    reuse, last, rows_bound = False, math.inf, None
    for iteration in range(1, _MAX_NEWTON + 1):
        if not math.isfinite(norm):
            raise ArithmeticError("the residual holds NaN or inf")
        if not reuse:
            J = compiled.jac(points, values(y, z), p, k)  # (n, n, points)
            Jn = np.moveaxis(J[:, :, :m], -1, 0)  # (m, n, n)
            Js = np.moveaxis(J[:, :, m:], -1, 0).reshape(m - 1, 2, n, n)
            Jl, Jr = Jn[:-1], Jn[1:]
            JsT = Js.transpose(0, 2, 1, 3)  # (m-1, n, 2, n): [i, a, l, b]
            # stage rows s = 1, 2: d/dZ_l = delta_sl - h a_sl J(Z_l), d/dy_i, d/dy_i+1, d/dp
            Kss = eye2 - (hA[:, :, None, 1:3, None] * JsT[:, None]).reshape(m - 1, 2 * n, 2 * n)
            cols = np.empty((m - 1, 2, n, width))
            cols[:, :, :, :n] = -eye - hA[:, :, 0, None, None] * Jl[:, None]
            cols[:, :, :, n:2 * n] = -hA[:, :, 3, None, None] * Jr[:, None]
            if n_p:
                P = np.moveaxis(compiled.pjac(points, values(y, z), p, k), -1, 0)  # (points, n, n_p)
                Pn, Ps = P[:m], P[m:].reshape(m - 1, 2, n, n_p)
                cols[:, :, :, 2 * n:2 * n + n_p] = -(hA[:, :, 0, None, None] * Pn[:-1, None]
                                                     + np.einsum("isl,ilab->isab", hA[:, :, 1:3], Ps)
                                                     + hA[:, :, 3, None, None] * Pn[1:, None])
                Kep = -(hB[:, 0, None, None] * Pn[:-1] + np.einsum("il,ilab->iab", hB[:, 1:3], Ps)
                        + hB[:, 3, None, None] * Pn[1:])
            cols = cols.reshape(m - 1, 2 * n, width)
            KeY = -(hB[:, None, 1:3, None] * JsT).reshape(m - 1, n, 2 * n)  # end rows, d/dZ
            try:
                inverse = np.linalg.inv(Kss)
            except np.linalg.LinAlgError:
                raise SingularMatrix("a stage block is singular") from None
            X = inverse @ cols[:, :, :-1]  # the stages' response to y_i, y_i+1, p
            KX = KeY @ X
            left = -eye - hB[:, 0, None, None] * Jl - KX[:, :, :n]
            right = eye - hB[:, 3, None, None] * Jr - KX[:, :, n:2 * n]
            pblock = Kep - KX[:, :, 2 * n:] if n_p else None
            a, b, dp = compiled.bc_jac(y[:, 0], y[:, -1], p, k)
            lu = factor_blocks(left, right, pblock, a, b, dp if n_p else None, scale)
            rows_bound = np.max(np.sum(np.abs(Jn), axis=2), axis=1)
        gs_flat = gs.transpose(1, 2, 0).reshape(m - 1, 2 * n)  # rows (stage, state)
        Xg = np.einsum("ijk,ik->ij", inverse, gs_flat)
        rhs_e = ge.T - np.einsum("ijk,ik->ij", KeY, Xg)
        step = lu.solve(-scale * np.concatenate([rhs_e.ravel(), bc]))  # rows scaled as the matrix's
        dy = step[: n * m].reshape(m, n).T
        dp_ = step[n * m:]
        known = np.concatenate([dy[:, :-1].T, dy[:, 1:].T, np.broadcast_to(dp_, (m - 1, n_p))], axis=1)
        dZ = -(Xg + np.einsum("ijk,ik->ij", X, known))
        dz = dZ.reshape(m - 1, 2, n).transpose(2, 0, 1)
        alpha = 1.0
        while True:
            y_new, z_new, p_new = y + alpha * dy, z + alpha * dz, p + alpha * dp_
            with np.errstate(all="ignore"):
                parts = residual(y_new, z_new, p_new)
            new_norm = size(*parts)
            if new_norm < norm or (alpha == 1.0 and new_norm <= 10 * norm and norm < 1e-8) or alpha < 1 / 64:
                break
            if reuse:  # a simplified step that does not help: form the matrix afresh, step again
                break
            alpha *= 0.5
        if not math.isfinite(new_norm) and not reuse:
            raise ArithmeticError("Newton's step ran into NaN or inf")
        change = max(float(np.max(np.abs(alpha * dy) / (1 + np.abs(y)))),
                     float(np.max(np.abs(alpha * dp_) / (1 + np.abs(p)), initial=0.0)))
        if reuse and not (new_norm < norm or (new_norm <= 10 * norm and norm < 1e-8)):
            reuse = False  # the kept factors no longer help: discard the step, form the matrix afresh
            continue
        # the contraction of this step: of the steps for a simplified one, else of the residual
        after, before = (change, last) if reuse else (new_norm, norm)
        rate = after / before if before > 0 else 0.0  # a residual of exactly zero (a zero solution) is converged
        y, z, p, (gs, ge, bc), norm = y_new, z_new, p_new, parts, new_norm
        if alpha == 1.0 and change <= threshold and (not reuse or rate <= 0.5):
            h_rows = h * np.maximum(rows_bound[:-1], rows_bound[1:])
            return _Discrete(x, y, z, p, iteration, lu, scale, float(np.max(h_rows, initial=0.0)))
        # keep the factors while the contraction brings the step below the threshold within
        # _REUSE_STEPS simplified steps (each costs a fraction of a full one)
        reuse = alpha == 1.0 and change * rate ** _REUSE_STEPS <= threshold
        last = change
    raise ArithmeticError(f"Newton's method did not converge in {_MAX_NEWTON} iterations")


def _split(x: np.ndarray, pieces: np.ndarray) -> np.ndarray:
    """The mesh with interval ``i`` cut into ``pieces[i]`` equal parts."""
    owner = np.repeat(np.arange(x.size - 1), pieces)
    j = np.arange(owner.size) - np.repeat(np.cumsum(pieces) - pieces, pieces) + 1
    inner = x[owner] + np.diff(x)[owner] * j / pieces[owner]
    inner[np.cumsum(pieces) - 1] = x[1:]  # the old nodes exactly
    return np.concatenate([x[:1], inner])


def _pieces(error: np.ndarray, tol: float) -> np.ndarray:
    """Into how many pieces each interval is cut for its ``error`` to fall to ``_AIM * tol``."""
    return np.clip(np.ceil((error / (_AIM * tol)) ** (1 / _ORDER)), 1, _MAX_SPLIT).astype(int)


def _halved(x: np.ndarray) -> np.ndarray:
    fine = np.empty(2 * x.size - 1)
    fine[::2], fine[1::2] = x, 0.5 * (x[1:] + x[:-1])
    return fine


def _start(compiled, solution: _Discrete | None, x: np.ndarray, y0: np.ndarray, x0: np.ndarray,  # noqa: ANN001
           p: np.ndarray, k: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and stages on mesh ``x``: from a converged solution's polynomials, or by linear
    interpolation of a guess ``(x0, y0)``."""
    stages = _positions(x).ravel()
    if solution is not None:
        return solution.at(compiled, x, k), solution.at(compiled, stages, k).reshape(-1, x.size - 1, 2)
    y = np.array([np.interp(x, x0, row) for row in y0])
    z = np.array([np.interp(stages, x0, row) for row in y0]).reshape(-1, x.size - 1, 2)
    return y, z


def _indicator(compiled, coarse: _Discrete, fine: _Discrete, k: np.ndarray) -> np.ndarray:  # noqa: ANN001
    """Per interval of the coarse mesh, the largest relative difference ``|u - u_fine| / (1 +
    |u_fine|)`` at its output points and between them (the coarse output's C1 cubic, as a
    Solution evaluates it, against the fine polynomials)."""

    xo, yo = coarse.output()
    mid = 0.5 * (xo[1:] + xo[:-1])
    points = np.concatenate([xo, mid])
    F = coarse.slopes(compiled, k)  # f at the output points, as a Solution's interpolant takes them
    slopes = np.empty_like(yo)
    slopes[:, ::3], slopes[:, 1::3], slopes[:, 2::3] = np.concatenate([F[:, :, 0], F[:, -1:, 3]], axis=1), \
        F[:, :, 1], F[:, :, 2]
    mine = np.concatenate([yo, Hermite(xo, yo, slopes)(mid)], axis=1)
    theirs = fine.at(compiled, points, k)
    diff = np.max(np.abs(mine - theirs) / (1 + np.abs(theirs)), axis=0)
    if coarse.p.size:
        diff = np.maximum(diff, float(np.max(np.abs(coarse.p - fine.p) / (1 + np.abs(fine.p)))))
    i = np.clip(np.searchsorted(coarse.x, points, side="right") - 1, 0, coarse.x.size - 2)
    out = np.zeros(coarse.x.size - 1)
    np.maximum.at(out, i, diff)
    # a node is shared by two intervals: its difference counts for the one on its left too
    at_nodes = np.isin(points, coarse.x[1:-1])
    np.maximum.at(out, i[at_nodes] - 1, diff[at_nodes])
    return out


@dataclass
class _State:
    """The finer solve of the last round, the reference of the error estimate."""
    reference: Outcome


class SixthOrderCollocation(Method):
    name = "collocation6"
    takes = frozenset({"algebraic"})  # solved inside the compiled callables, as for collocation
    summary = "6th-order Lobatto IIIA collocation (4 stages), error controlled against the halved mesh"
    rank = 3
    #: "tight": the method to prefer at tight tolerances on smooth problems (its cost per
    #: digit falls with the order).
    strengths = frozenset({"tight"})
    order = 6
    #: Work per mesh node of a solve with its estimate against 4th-order collocation's: the
    #: last round solves the halved mesh too, and a node carries two stages. Measured with
    #: benchmarks/collocation.py (sixth_order at 1e-10 and 1e-11, tight_auto) on Blasius, Bratu,
    #: Troesch and a beam: the sixth order takes 0.97-1.18 times the fourth's time at 1e-10,
    #: 0.08-1.01 at 1e-11 and 0.2-0.45 at 1e-12; 7.5 * tol**(1/4 - 1/6) = 1 places the
    #: break-even at 3.2e-11.
    node_cost = 7.5

    def _solve(self, trial: Trial) -> Outcome:
        c, k = trial.compiled, trial.k
        x0, y0 = np.asarray(trial.x, float), np.array(trial.y, dtype=float)
        p = np.asarray(trial.p, float)
        if x0.size < 2 or not np.all(np.diff(x0) > 0):
            return Outcome(Status.NOT_CONVERGED, "the starting mesh is not strictly increasing", x0, y0, p)
        if not (np.isfinite(y0).all() and np.isfinite(p).all()):
            return Outcome(Status.NON_FINITE, "the guess holds NaN or inf", x0, y0, p)
        tol = max(trial.tol, TOL_FLOOR)
        # the starting mesh: the guess's, thinned (each interval of this method does the work
        # of several of the 4th-order one), or at tight tolerances the nodes they predict
        x = x0[::2] if x0.size > 21 else x0.copy()
        if x[-1] != x0[-1]:
            x = np.append(x, x0[-1])
        wanted = int(math.ceil(_FIRST_NODES * max(1.0, _FIRST_TOL / tol) ** (1 / self.order)))
        if x.size < wanted:
            x = _split(x, np.full(x.size - 1, -(-(wanted - 1) // (x.size - 1))))
        x = seeded(x, trial.features)  # the narrow features of the equations stay seeded
        y, z = _start(c, None, x, y0, x0, p, k)
        previous: _Discrete | None = None
        ready: _Discrete | None = None
        iterations = 0
        with one_blas_thread(c.n), np.errstate(all="ignore"):
            for _ in range(_MAX_ROUNDS):
                if trial.out_of_time():
                    return Outcome(Status.NOT_CONVERGED, f"stopped after {iterations} Newton iterations on {x.size} "
                                   "nodes: the time budget of this attempt is spent; " + Status.NOT_CONVERGED.hint,
                                   x0, y0, p, iterations=iterations)
                try:
                    if ready is None:
                        coarse = _newton(c, x, y, z, p, k, tol)
                        iterations += coarse.iterations
                    else:  # the last round's halved mesh is this round's mesh: solved already
                        coarse, ready = ready, None
                    if coarse.reach <= _SMOOTH:
                        # a round whose own defect shows it far from the tolerance is refined at
                        # once; the halved mesh is solved only to check a mesh expected to pass
                        expected = coarse.defect_estimate(c, k)
                        if np.all(np.isfinite(expected)) and expected.max() > _SAFETY * tol:
                            new_x = _split(x, _pieces(expected, tol))
                            if 3 * (2 * new_x.size - 2) + 1 <= trial.max_nodes:  # its halved mesh too
                                y, z = _start(c, coarse, new_x, y0, x0, coarse.p, k)
                                x, p, previous = new_x, coarse.p, coarse
                                continue
                    fx = _halved(x)
                    fy, fz = _start(c, coarse, fx, y0, x0, coarse.p, k)
                    fine = _newton(c, fx, fy, fz, coarse.p, k, tol)
                    iterations += fine.iterations
                except SingularMatrix:
                    return Outcome(Status.SINGULAR, "the collocation Newton matrix is singular; " + Status.SINGULAR.hint,
                                   x0, y0, p, iterations=iterations)
                except ArithmeticError as err:
                    if previous is None:
                        return Outcome(Status.NOT_CONVERGED, f"{err}; " + Status.NOT_CONVERGED.hint, x0, y0, p,
                                       iterations=iterations)
                    return Outcome(Status.NOT_CONVERGED, f"{err} on the refined mesh of {x.size} nodes; "
                                   + Status.NOT_CONVERGED.hint, x0, y0, p, iterations=iterations)
                indicator = _indicator(c, coarse, fine, k)
                if not np.all(np.isfinite(indicator)):
                    return Outcome(Status.NON_FINITE, "the solution holds NaN or inf; " + Status.NON_FINITE.hint,
                                   x0, y0, p, iterations=iterations)
                if indicator.max() <= _SAFETY * tol:
                    xo, yo = coarse.output()
                    fxo, fyo = fine.output()
                    # the nodes counted are those of the solution handed on (the mesh and the two
                    # Lobatto points inside each interval), as the summary counts them
                    outcome = Outcome(Status.SOLVED, f"converged in {iterations} Newton iterations on {xo.size} nodes "
                                      f"({x.size - 1} intervals of 3 collocation points; the error estimate from "
                                      f"{fx.size - 1} halved intervals)", xo, yo, coarse.p, iterations=iterations)
                    reference = Outcome(Status.SOLVED, "the halved mesh", fxo, fyo, fine.p)
                    # the stability constant from the last Newton matrix (rows in derivative units)
                    reference.condition = stability_constant(fine.lu, fine.lu.size, fine.scale)
                    outcome.workspace = _State(reference)
                    return outcome
                pieces = _pieces(indicator, tol)
                if pieces.max() <= 2 and np.mean(pieces == 2) >= _REUSE:
                    new_x, ready = fx, fine  # most intervals halved: take the halved mesh, solved already
                else:
                    new_x = _split(x, pieces)
                if 3 * (2 * new_x.size - 2) + 1 > trial.max_nodes:
                    xo, yo = coarse.output()
                    return Outcome(Status.MESH_LIMIT, f"mesh limit reached ({trial.max_nodes} nodes): raise max_nodes, "
                                   "loosen tol or give a better guess", xo, yo, coarse.p, iterations=iterations)
                if ready is None:
                    y, z = _start(c, fine, new_x, y0, x0, fine.p, k)
                x, p, previous = new_x, fine.p, fine
        xo, yo = previous.output() if previous is not None else (x0, y0)
        return Outcome(Status.NOT_CONVERGED, f"the error did not fall below the tolerance in {_MAX_ROUNDS} rounds of "
                       "refinement; " + Status.NOT_CONVERGED.hint, xo, yo, p, iterations=iterations)

    def _refine(self, trial: Trial, outcome: Outcome) -> Outcome:
        """The solve on the halved mesh that the error control already made; an outcome from
        elsewhere is solved afresh from its values."""
        state = outcome.workspace
        if isinstance(state, _State):
            return state.reference
        fresh = self._solve(dataclasses.replace(trial, x=outcome.x, y=outcome.y, p=outcome.p))
        if fresh.ok and isinstance(fresh.workspace, _State):
            return fresh.workspace.reference
        return fresh
