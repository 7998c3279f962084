"""Collocation: SciPy's ``solve_bvp`` with the exact Jacobians from codegen.

``solve_bvp`` is a 4th-order collocation method (3-stage Lobatto IIIA, a cubic C1 spline
solution) with residual control and mesh refinement (Kierzenka and Shampine, 2001, ACM
TOMS 27, 299-316). bvpkit supplies the exact Jacobians ``df/dy``, ``df/dp`` and those of
the boundary conditions, so no finite differences are taken.

Error estimate: the final mesh is halved and the problem solved again from the solution;
with a 4th-order method the difference is close to the error of the coarse solution.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from scipy.integrate import solve_bvp

import scipy.sparse as sparse
from scipy.sparse.linalg import splu

from ..diagnostics import hermite, stability_constant
from ..discrete import CollocationEquations
from ..status import Status
from .base import Method, Outcome, Trial

_REFINE_STEPS = 3  # Newton steps on the halved mesh; one or two reach it from the coarse solution
_STATUS = {0: Status.SOLVED, 1: Status.MESH_LIMIT, 2: Status.SINGULAR, 3: Status.NOT_CONVERGED}


def _trouble(x: np.ndarray, rms: np.ndarray | None) -> str:
    """Where the residual is worst, as words (a thin layer or steep front shows up there)."""
    if rms is None or rms.size != x.size - 1 or not np.any(np.isfinite(rms)):
        return ""
    i = int(np.nanargmax(rms))
    return f" the residual is largest near x = {0.5 * (x[i] + x[i + 1]):.4g} (a thin layer or steep front?);"


class Collocation(Method):
    name = "collocation"
    summary = "4th-order collocation with mesh refinement (SciPy solve_bvp, exact Jacobians)"

    def _solve(self, trial: Trial) -> Outcome:
        c, k = trial.compiled, trial.k
        n_p = c.n_parameters
        empty = np.zeros(0)
        if n_p:

            def fun(x, y, p):
                return c.rhs(x, y, p, k)

            def fun_jac(x, y, p):
                return c.jac(x, y, p, k), c.pjac(x, y, p, k)

            def bc(ya, yb, p):
                return c.bc(ya, yb, p, k)

            def bc_jac(ya, yb, p):
                return c.bc_jac(ya, yb, p, k)

        else:

            def fun(x, y):
                return c.rhs(x, y, empty, k)

            def fun_jac(x, y):
                return c.jac(x, y, empty, k)

            def bc(ya, yb):
                return c.bc(ya, yb, empty, k)

            def bc_jac(ya, yb):
                return c.bc_jac(ya, yb, empty, k)[:2]

        x, y = np.asarray(trial.x, float), np.asarray(trial.y, float)
        if x.size < 2 or not np.all(np.diff(x) > 0):
            return Outcome(Status.NOT_CONVERGED, "the starting mesh is not strictly increasing", x, y, trial.p)
        if not (np.all(np.isfinite(y)) and np.all(np.isfinite(trial.p))):
            return Outcome(Status.NON_FINITE, "the guess holds NaN or inf", x, y, trial.p)
        f0 = fun(x, y, trial.p) if n_p else fun(x, y)
        if not np.all(np.isfinite(f0)):
            i, j = np.argwhere(~np.isfinite(f0))[0]
            names = c.system.state_names
            values = ", ".join(f"{names[r]} = {y[r, j]:.4g}" for r in range(min(len(names), 4)))
            return Outcome(
                Status.NON_FINITE,
                f"the equations give NaN or inf for the derivative of {names[i]} at x = {x[j]:.6g} with the "
                f"guess ({values}): {Status.NON_FINITE.hint}",
                x,
                y,
                trial.p,
            )
        res = solve_bvp(
            fun,
            bc,
            x,
            y,
            p=trial.p if n_p else None,
            S=trial.singular,
            fun_jac=fun_jac,
            bc_jac=bc_jac,
            tol=max(trial.tol, 1e-13),
            max_nodes=trial.max_nodes,
            verbose=0,
        )
        status = _STATUS.get(res.status, Status.NOT_CONVERGED)
        p = np.asarray(res.p, float) if n_p else empty
        if status is Status.SOLVED:
            message = f"converged in {res.niter} Newton iterations on {res.x.size} nodes"
        elif status is Status.MESH_LIMIT:
            message = (
                f"mesh limit reached ({trial.max_nodes} nodes):{_trouble(res.x, res.rms_residuals)} raise "
                "max_nodes, loosen tol or give a better guess"
            )
        elif status is Status.SINGULAR:
            message = "the collocation Newton matrix is singular; " + status.hint
        else:
            message = "Newton's method did not meet the boundary-condition tolerance; " + status.hint
        return Outcome(status, message, res.x, res.y, p, iterations=int(res.niter))

    def _refine(self, trial: Trial, outcome: Outcome) -> Outcome:
        """The solution on the halved mesh, by Newton's method on the collocation equations.

        Started from the coarse solution, which is already within its error of the fine
        one, one or two Newton steps reach the fine discrete solution (quadratic
        convergence); the LU of that step also gives the stability constant. Problems with a
        singular term go through ``solve_bvp`` instead.
        """
        x = outcome.x
        fine = np.unique(np.concatenate([x, 0.5 * (x[1:] + x[:-1])]))
        spacing = np.diff(fine) > 1e-13 * max(1.0, float(np.abs(fine).max()))
        fine = fine[np.concatenate([[True], spacing])]
        y = hermite(trial.compiled, x, outcome.y, outcome.p, trial.k)(fine)
        if trial.singular is not None:
            refined = dataclasses.replace(
                trial, x=fine, y=y, p=outcome.p, max_nodes=max(trial.max_nodes, 2 * fine.size)
            )
            return self._solve(refined)
        equations = CollocationEquations(trial.compiled, fine, trial.k)
        z = equations.join(y, outcome.p)
        scale = equations.row_scale()
        for step in range(_REFINE_STEPS):
            residual = equations.residual(z)
            matrix = sparse.diags(scale) @ equations.jacobian(z)
            if not (np.all(np.isfinite(residual)) and np.all(np.isfinite(matrix.data))):
                return Outcome(Status.NON_FINITE, "the refined collocation equations hold NaN or inf", fine, y, outcome.p)
            try:
                lu = splu(matrix.tocsc())
            except RuntimeError:
                return Outcome(Status.SINGULAR, "the refined collocation matrix is singular", fine, y, outcome.p)
            delta = lu.solve(-scale * residual)
            z = z + delta
            if np.max(np.abs(delta) / (1.0 + np.abs(z))) <= 1e-3 * trial.tol:
                break
        y_fine, p_fine = equations.split(z)
        result = Outcome(Status.SOLVED, "refined", fine, y_fine, p_fine, iterations=step + 1)
        result.condition = stability_constant(lu, matrix.shape[0])
        return result
