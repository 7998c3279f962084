"""The collocation equations of SciPy's ``solve_bvp`` on a fixed mesh, with an exact sparse Jacobian.

3-stage Lobatto IIIA (Kierzenka and Shampine 2001): on each interval
``y_i+1 - y_i - h/6 (f_i + 4 f_mid + f_i+1) = 0`` with
``y_mid = (y_i + y_i+1)/2 - h/8 (f_i+1 - f_i)``, then the boundary conditions. The Jacobian
is assembled from codegen's exact ``df/dy`` and ``df/dp`` (the block formulas are those of
SciPy's own ``construct_global_jac``). Used for the collocation error estimate (a Newton step
on the halved mesh) and for pseudo-arclength continuation.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sparse
from scipy.sparse.linalg import splu

_MAX_NEWTON = 12


def node_weights(x: np.ndarray) -> np.ndarray:
    """Trapezoidal weights of the mesh nodes, divided by the length: sums over the nodes
    approximate mean values, so norms of states do not grow with the mesh."""
    h = np.diff(x)
    w = np.zeros(x.size)
    w[:-1] += 0.5 * h
    w[1:] += 0.5 * h
    return w / ((x[-1] - x[0]) or 1.0)


class CollocationEquations:
    """The collocation equations of ``solve_bvp`` on a fixed mesh, the parameter an unknown.

    Unknowns ``z = (y.ravel() in node-major order, p)``; equations: the Lobatto IIIA
    residuals ``y_i+1 - y_i - h/6 (f_i + 4 f_mid + f_i+1)`` with
    ``y_mid = (y_i + y_i+1)/2 - h/8 (f_i+1 - f_i)``, then the boundary conditions.
    """

    def __init__(self, compiled, x: np.ndarray, k: np.ndarray):  # noqa: ANN001
        self.c, self.x, self.k = compiled, x, k
        self.n, self.m = compiled.n, x.size
        self.n_p = compiled.n_parameters
        self.h = np.diff(x)
        self.mid = x[:-1] + 0.5 * self.h
        self.weights = np.concatenate([np.repeat(node_weights(x), self.n), np.ones(self.n_p)])

    def row_scale(self) -> np.ndarray:
        """Row factors putting each interval's rows in derivative units (1/h); conditions as they are."""
        nb = self.c.bc(np.zeros(self.n), np.zeros(self.n), np.zeros(self.n_p), self.k).size
        return np.concatenate([np.repeat(1.0 / self.h, self.n), np.ones(nb)])

    def split(self, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return z[: self.n * self.m].reshape(self.m, self.n).T, z[self.n * self.m:]

    def join(self, y: np.ndarray, p: np.ndarray) -> np.ndarray:
        return np.concatenate([y.T.ravel(), p])

    def residual(self, z: np.ndarray) -> np.ndarray:
        y, p = self.split(z)
        c, k, h = self.c, self.k, self.h
        f = c.rhs(self.x, y, p, k)
        ym = 0.5 * (y[:, 1:] + y[:, :-1]) - h / 8 * (f[:, 1:] - f[:, :-1])
        fm = c.rhs(self.mid, ym, p, k)
        col = y[:, 1:] - y[:, :-1] - h / 6 * (f[:, :-1] + f[:, 1:] + 4 * fm)
        return np.concatenate([col.T.ravel(), c.bc(y[:, 0], y[:, -1], p, k)])

    def jacobian(self, z: np.ndarray) -> sparse.csc_matrix:
        y, p = self.split(z)
        c, k, h, n, m, n_p = self.c, self.k, self.h, self.n, self.m, self.n_p
        f = c.rhs(self.x, y, p, k)
        ym = 0.5 * (y[:, 1:] + y[:, :-1]) - h / 8 * (f[:, 1:] - f[:, :-1])
        J = np.moveaxis(c.jac(self.x, y, p, k), -1, 0)  # (m, n, n)
        Jm = np.moveaxis(c.jac(self.mid, ym, p, k), -1, 0)  # (m-1, n, n)
        eye = np.eye(n)
        hh = h[:, None, None]
        left = -eye - hh / 6 * (J[:-1] + 4 * Jm @ (0.5 * eye + hh / 8 * J[:-1]))
        right = eye - hh / 6 * (J[1:] + 4 * Jm @ (0.5 * eye - hh / 8 * J[1:]))
        i = np.arange(m - 1)[:, None, None]
        r = np.arange(n)
        rows = (i * n + r[None, :, None]).repeat(n, axis=2)
        cols = (i * n + r[None, None, :]).repeat(n, axis=1)
        R, C, V = [rows.ravel(), rows.ravel()], [cols.ravel(), (cols + n).ravel()], [left.ravel(), right.ravel()]
        if n_p:
            P = np.moveaxis(c.pjac(self.x, y, p, k), -1, 0)  # (m, n, n_p)
            Pm = np.moveaxis(c.pjac(self.mid, ym, p, k), -1, 0)
            dym = -hh / 8 * (P[1:] - P[:-1])
            block = -hh / 6 * (P[:-1] + P[1:] + 4 * (Pm + Jm @ dym))
            prow = (i * n + r[None, :, None]).repeat(n_p, axis=2)
            pcol = np.broadcast_to(n * m + np.arange(n_p)[None, None, :], prow.shape)
            R.append(prow.ravel()); C.append(pcol.ravel()); V.append(block.ravel())  # noqa: E702
        a, b, dp = c.bc_jac(y[:, 0], y[:, -1], p, k)
        base = (m - 1) * n
        nb = a.shape[0]
        for block, offset, width in ((a, 0, n), (b, (m - 1) * n, n), (dp, n * m, n_p)):
            if width == 0:
                continue
            rr, cc = np.meshgrid(base + np.arange(nb), offset + np.arange(width), indexing="ij")
            R.append(rr.ravel()); C.append(cc.ravel()); V.append(np.asarray(block).ravel())  # noqa: E702
        shape = (base + nb, n * m + n_p)
        return sparse.csc_matrix((np.concatenate(V), (np.concatenate(R), np.concatenate(C))), shape=shape)

    def tangent(self, z: np.ndarray, previous: np.ndarray) -> np.ndarray:
        """Unit tangent (weighted norm) of the solution curve at ``z``, oriented like ``previous``."""
        matrix = sparse.vstack([self.jacobian(z), sparse.csr_matrix(previous * self.weights)]).tocsc()
        rhs = np.zeros(matrix.shape[0])
        rhs[-1] = 1.0
        t = splu(matrix).solve(rhs)
        t /= math.sqrt(float(np.sum(self.weights * t * t)))
        return t if float(np.sum(self.weights * t * previous)) >= 0 else -t

    def correct(self, predicted: np.ndarray, tangent: np.ndarray, tol: float) -> tuple[np.ndarray | None, int]:
        """Newton on ``G(z) = 0``, ``<t, z - z_pred> = 0``; None when it does not converge."""
        z = predicted.copy()
        border = sparse.csr_matrix(tangent * self.weights)
        for it in range(1, _MAX_NEWTON + 1):
            g = self.residual(z)
            r = np.concatenate([g, [float(np.sum(self.weights * tangent * (z - predicted)))]])
            if not np.all(np.isfinite(r)):
                return None, it
            try:
                step = splu(sparse.vstack([self.jacobian(z), border]).tocsc()).solve(-r)
            except RuntimeError:
                return None, it
            z = z + step
            if not np.all(np.isfinite(z)):
                return None, it
            if np.max(np.abs(step) / (1.0 + np.abs(z))) <= 0.01 * tol:
                return z, it
        return None, _MAX_NEWTON


