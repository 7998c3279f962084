"""Stability of a steady state: the sign of the principal eigenvalue of its linearisation.

A boundary-value problem says nothing of time, so whether its solution is stable depends on
the evolution it is the steady state of. bvpkit answers for one evolution, and only when the
caller asks (``trace(..., stability=True)``): a problem whose unknown functions are all of
second order, ``u'' = g(x, u, u')``, is read as the steady state of the diffusion equation

    u_t = u'' - g(x, u, u')        (the same boundary conditions),

the reading of reaction-diffusion models, heat conduction with a source, catalyst pellets and
ignition problems. The steady state is stable when every eigenvalue ``mu`` of the linearised
problem ``v'' - g_u v - g_u' v' = mu v`` (with the linearised conditions) has a negative real
part, unstable when one has a positive real part. For a problem read otherwise (an elastica
whose ends are constrained in a way the conditions do not state, a beam, a third-order flow)
the answer would be about another question, so it is not given: None.

Where it applies: one region on a finite domain, every unknown function of order two, no
unknown parameter, no singular term. Elsewhere :func:`principal_eigenvalue` returns None.

Discretisation. The collocation equations of the linear problem ``v' = (J + mu E) v`` on the
solution's own mesh, with ``J`` the exact Jacobian along the solution and ``E`` the matrix
that adds ``mu v`` to the rows of the derivatives ``u'`` (in the standard form's variable
``t``: times the length of the domain, read off ``J`` itself). ``E^2 = 0``, so the Newton
blocks of those equations are exactly linear in ``mu``: ``G v = mu N v``, ``G`` the Newton
matrix of the solution and ``N`` the derivative of the blocks in ``mu`` (zero rows for the
conditions: eigenvalues at infinity). The eigenvalues with the largest real parts are found
by shift-invert from an upper bound of the spectrum (for ``v'' + p v' + q v``:
``max q + max p^2 / 4`` and a margin).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import scipy.sparse as sparse

from ..methods.discrete import CollocationEquations, block_matrix

#: Eigenvalues within this part of the spectrum's bound from zero decide nothing (a fold or a
#: branch point is where the principal eigenvalue crosses zero).
UNDECIDED = 1e-6
_COUNT = 4  # eigenvalues sought nearest the bound


def principal_eigenvalue(solution: Any) -> float | None:
    """The largest real part of the eigenvalues of the linearised diffusion problem at
    ``solution`` (see the module docstring), or None where that reading does not apply."""
    if not getattr(solution, "success", False):
        return None
    view = solution.interpolant
    c, layout = view.compiled, view.layout
    classes = solution.prepared.transforms
    if (layout.regions != 1 or not all(t.keeps_evolution for t in classes) or layout.parameters
            or layout.users != len(layout.states) or any(order != 2 for _, order in layout.functions)):
        return None
    x, y, p, k = view.t, view.y, view.p, view.k
    n = c.n
    eq = CollocationEquations(c, x, k)
    seen: dict = {}
    with np.errstate(all="ignore"):
        left, right, _, (a, b, _) = eq._blocks(y, p, seen=seen)
    J, Jm = seen["J"], seen["Jm"]  # the Jacobians at the nodes and midpoints the blocks were made of
    if a.shape[0] != n or not (np.isfinite(J).all() and np.isfinite(Jm).all()):
        return None
    value_rows = [layout.index(name, 0) for name, _ in layout.functions]
    slope_rows = [layout.index(name, 1) for name, _ in layout.functions]
    length = J[:, value_rows, slope_rows]  # d u / d t = length * u': the domain's length, per node
    if not (np.all(length > 0) and np.ptp(length) <= 1e-12 * np.max(length)):
        return None
    h_len = float(length[0, 0])
    E = np.zeros((n, n))
    E[slope_rows, value_rows] = h_len
    hh = eq.h[:, None, None]
    d_left = -(hh / 6) * (3 * E + (hh / 2) * (E @ J[:-1] + Jm @ E))
    d_right = -(hh / 6) * (3 * E - (hh / 2) * (E @ J[1:] + Jm @ E))
    zeros = np.zeros((n, n))
    G = block_matrix(left, right, None, a, b, None)
    N = -block_matrix(d_left, d_right, None, zeros, zeros, None)
    # a bound of the spectrum of v'' + p v' + q v (rows of u'' in x-units: J / length)
    rows = np.abs(J[:, slope_rows, :]) / h_len
    r = float(np.max(np.sum(rows, axis=2)))
    bound = 2.0 * (r + r * r / 4.0) + 10.0
    return _largest(G, N, bound)


def _largest(G: sparse.csc_matrix, N: sparse.csc_matrix, bound: float) -> float | None:
    """The largest real part among the eigenvalues of ``G v = mu N v`` nearest ``bound``."""
    from scipy.sparse.linalg import ArpackError, ArpackNoConvergence, LinearOperator, eigs, splu

    size = G.shape[0]
    count = min(_COUNT, size - 2)
    if count < 1:
        return None
    try:
        lu = splu(sparse.csc_matrix(G - bound * N))
    except RuntimeError:
        return None
    Nc = sparse.csr_matrix(N)
    op = LinearOperator((size, size), matvec=lambda v: lu.solve(Nc @ v), dtype=float)
    try:
        nu = eigs(op, k=count, which="LM", v0=np.ones(size), tol=1e-10, return_eigenvectors=False)
    except (ArpackError, ArpackNoConvergence, ValueError):
        return None
    nu = nu[np.abs(nu) > 0]
    if nu.size == 0:
        return None
    mu = bound + 1.0 / nu
    best = float(np.max(mu.real))
    return best if math.isfinite(best) else None


def stable(solution: Any) -> bool | None:
    """True (stable), False (unstable) or None (the reading does not apply, or the principal
    eigenvalue is too close to zero to tell)."""
    mu = principal_eigenvalue(solution)
    if mu is None:
        return None
    scale = 1.0 + abs(mu)
    if abs(mu) <= UNDECIDED * scale:
        return None
    return mu < 0
