"""Collocation: 4th-order Lobatto IIIA collocation with residual control, exact Jacobians.

The method is that of SciPy's ``solve_bvp`` (3-stage Lobatto IIIA, a C1 cubic solution,
control of the relative residual by a 5-point Lobatto quadrature on each interval, nodes
added where it is too large; Kierzenka and Shampine, 2001, ACM TOMS 27, 299-316), run on
bvpkit's own equations (``discrete.py``): the exact Jacobians ``df/dy``, ``df/dp`` from
codegen, the blocks formed with batched matrix products, and a banded LU when the
boundary conditions are separated. The Newton iteration, its Armijo line search, the reuse
of the Jacobian after full steps and the stopping rule follow ``solve_bvp``, so a
tolerance means the same here as there. A term ``S y / t`` singular at ``t = 0`` is treated
as ``solve_bvp`` treats it: it is part of the compiled right-hand side, with its limit
``(I - S)^+ F`` at ``t = 0``, and the start is projected onto ``S y(0) = 0``.

Error estimate: deferred correction (``CollocationEquations.defect_correction``), one solve with the last
Newton matrix.

Round-off: the residual of an interval cannot fall below the rounding of the states it is
computed from (a difference of two values of size ``|y|`` divided by the step ``h`` carries
an error of about ``eps |y| / h``, which grows as the mesh is refined). :func:`_roundoff_floor`
estimates that floor from the size of the states and of the terms of the equations; an
interval whose residual is already at its floor is not refined, and when only such intervals
miss the tolerance the refinement stops: the error estimate decides, and a miss is reported as
:attr:`~bvpkit.status.Status.PRECISION_LIMIT` with the accuracy reached, never as a mesh
limit (refining would only have made it worse).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from ..language.options import TOL_FLOOR
from ..status import Status
from .base import Method, Outcome, Trial, compare
from .diagnostics import Hermite, hermite, stability_constant
from .discrete import CollocationEquations, SingularMatrix

_ROUNDS = 10  # rounds allowed that add no nodes (as solve_bvp's max_iteration)
# Refinement by the predicted factor: the residual of the cubic falls as h**_ORDER; an interval
# is cut to bring it to _AIM of the tolerance (a margin: one node more now is cheaper than a
# round more), into at most _MAX_PIECES parts per round (the prediction is rough far from the
# solution).
_ORDER = 3.5  # between the cubic's order 4 and what refinement rounds measured on the small problems
_AIM = 0.3
_MAX_PIECES = 8
_SETTLED = 1e-10  # a full Newton step below this relative size: the iteration has converged
_EVEN = 10.0  # a residual (or a mesh step) within this factor of the median marks no place (no layer)
_NEAR_TOL = 100.0  # ... when the residual is within this factor of the tolerance (a converging mesh)
_CRAWL = 0.01  # a round adding fewer nodes than this part of the mesh adds almost nothing
_CRAWL_ROUNDS = 3  # such rounds in a row end the refinement
_OUT_OF_DOMAIN_HALVINGS = 12  # steps down to 2^-12 of Newton's before a step out of the domain ends it
_STATUS = {0: Status.SOLVED, 1: Status.MESH_LIMIT, 2: Status.SINGULAR, 3: Status.NOT_CONVERGED}
_ROUNDING = float(np.finfo(float).eps)
# The residual's derivative of the cubic takes differences of the node values with Hermite
# weights up to 1.5 / h (the middle residual, 1.5 col / h, and |dH_0| + |dH_2| ~ 2.6 / h at the
# Lobatto nodes, of values that partly cancel): the noise of one value of size |y| enters the
# relative residual as about 1.5 eps |y| / h. Checked against the measured residuals of a pin
# fin at tol 1e-10 and a Graetz eigenproblem at tol 1e-12, where the residual stopped falling
# and rose again as the mesh was refined once it met this floor.
_ROUNDOFF_WEIGHT = 1.5


def _trouble(x: np.ndarray, rms: np.ndarray | None, place, tol: float) -> str:  # noqa: ANN001
    """Where the residual is worst, as words (a thin layer or steep front shows up there); a
    residual close to the tolerance and even over an even mesh is no layer, but a tolerance
    that needs more nodes everywhere."""
    if rms is None or rms.size != x.size - 1 or not np.any(np.isfinite(rms)):
        return ""
    i = int(np.nanargmax(rms))
    h = np.diff(x)
    if rms[i] <= _NEAR_TOL * tol and rms[i] <= _EVEN * np.nanmedian(rms) and h.min() >= np.median(h) / _EVEN:
        return (" the residual is close to the tolerance and about the same size everywhere on an even "
                "mesh (no layer): this tolerance needs more nodes than the limit with a method of order 4;")
    return f" the residual is largest near {place(0.5 * (x[i] + x[i + 1]))} (a thin layer or steep front?);"


@dataclass
class _State:
    """What a converged collocation solve keeps for its error estimate: the equations on the
    final mesh, their residual pieces and the factored Newton matrix; ``floor`` is the largest
    residual left unrefined because it was at the round-off level (0 when none was)."""

    equations: CollocationEquations
    parts: tuple
    lu: object
    floor: float = 0.0


def _floor_words(rms: np.ndarray | None, tol: float) -> str:
    """The residual reached, in words."""
    if rms is None or not np.any(np.isfinite(rms)):
        return "unknown"
    return f"{float(np.nanmax(rms)):.1g} at most, against the tolerance {tol:.1g}"


def _roundoff_floor(eq: CollocationEquations, y: np.ndarray, p: np.ndarray, parts,  # noqa: ANN001
                    which: np.ndarray) -> np.ndarray:
    """The smallest relative residual double precision allows on intervals ``which``: about
    ``eps (1.5 (|y_i| + |y_i+1|) / h + |f| + |J| |y|) / (h_r + |f|)`` per row (the rounding of
    the node values differenced over the step, and of the terms of the equations, whose sizes
    ``|J| |y|`` may be far above their sum ``f``), combined over the rows like the residual."""
    _, _, f, _, fm = parts
    i = which
    y0, y1 = np.abs(y[:, i]), np.abs(y[:, i + 1])
    with np.errstate(all="ignore"):
        jac = np.abs(eq.c.jac(eq.x[i], y[:, i], p, eq.k))  # (n, n, len(i))
        terms = np.einsum("ijm,jm->im", jac, y0)
        noise = _ROUNDOFF_WEIGHT * (y0 + y1) / eq.h[i] + np.abs(f[:, i]) + np.abs(fm[:, i]) + terms
        relative = _ROUNDING * noise / (eq.scale + np.abs(fm[:, i]))
    floor = np.sqrt(np.sum(relative**2, axis=0))
    return np.where(np.isfinite(floor), floor, 0.0)


def _pieces(residual: np.ndarray, tol: float) -> np.ndarray:
    """Into how many equal parts to cut each interval: as many as its residual's size predicts.

    The residual of an interval falls as ``h**_ORDER`` on smooth solutions; an interval over
    the tolerance is cut into the parts that bring it to ``_AIM`` of it (at least 2, at most
    ``_MAX_PIECES``), so one round usually does what several halvings would."""
    over = residual > tol
    ratio = np.where(over, residual / (_AIM * tol), 1.0)
    pieces = np.ceil(ratio ** (1 / _ORDER))
    return np.where(over, np.clip(pieces, 2, _MAX_PIECES), 1).astype(int)


def _split(x: np.ndarray, pieces: np.ndarray) -> np.ndarray:
    """The mesh with interval ``i`` cut into ``pieces[i]`` equal parts (the old nodes kept exactly)."""
    owner = np.repeat(np.arange(x.size - 1), pieces)
    j = np.arange(owner.size) - np.repeat(np.cumsum(pieces) - pieces, pieces) + 1
    inner = x[owner] + np.diff(x)[owner] * j / pieces[owner]
    inner[np.cumsum(pieces) - 1] = x[1:]
    return np.concatenate([x[:1], inner])


def _newton(eq: CollocationEquations, y: np.ndarray, p: np.ndarray, tol: float):  # noqa: ANN202
    """Damped Newton on the collocation equations of one mesh (the iteration of ``solve_bvp``).

    Returns ``(y, p, iterations, parts, lu, settled)`` with ``parts`` the residual pieces at
    the result, ``lu`` the last Newton matrix factored and ``settled`` whether the iteration
    found a solution of these equations (its residual met its target, or its last full step
    was below ``_SETTLED`` of the states: converged to round-off); raises
    :class:`SingularMatrix` when a Newton matrix is singular.
    """
    n, m = eq.n, eq.m
    tol_r = 2 / 3 * eq.h * 5e-2 * tol  # interval residuals 1.5 orders below the residual tolerance
    sigma, tau, trials = 0.2, 0.5, 4
    parts = eq.parts(y, p)
    res = np.concatenate([parts[0].T.ravel(), parts[1]])
    recompute, njev, iteration, settled = True, 0, 0, False
    for iteration in range(1, 9):
        if recompute:
            lu = eq.factor(y, p, parts[3])
            njev += 1
            step = lu.solve(res)
            cost = float(step @ step)
        y_step, p_step = step[: n * m].reshape(m, n).T, step[n * m:]
        alpha, trial, halvings = 1.0, 0, 0
        while True:
            y_new, p_new = y - alpha * y_step, p - alpha * p_step
            parts_new = eq.parts(y_new, p_new)
            res_new = np.concatenate([parts_new[0].T.ravel(), parts_new[1]])
            step_new = lu.solve(res_new) if np.isfinite(res_new).all() else res_new
            cost_new = float(step_new @ step_new)
            if not np.isfinite(cost_new) and halvings < _OUT_OF_DOMAIN_HALVINGS:
                # the step left the equations' domain (a power of a negative state, a log):
                # shorter steps, without counting them as the line search's own trials
                alpha *= tau
                halvings += 1
                continue
            if cost_new < (1 - 2 * alpha * sigma) * cost or trial >= trials:
                break
            alpha *= tau
            trial += 1
        if not np.isfinite(cost_new):
            break  # no step stays in the equations' domain: stop at the last good iterate
        y, p, parts, res = y_new, p_new, parts_new, res_new
        col, bc, _, _, fm = parts
        if (np.abs(col) < tol_r * (eq.scale + np.abs(fm))).all() and (np.abs(bc) < tol).all():
            settled = True
            break
        if alpha == 1.0 and np.max(np.abs(y_step) / (1.0 + np.abs(y)), initial=0.0) < _SETTLED:
            settled = True  # a full step at round-off level: converged as far as double precision goes
        if njev == 4:
            break
        if alpha == 1.0:  # a full step: keep the Jacobian (as solve_bvp does)
            step, cost, recompute = step_new, cost_new, False
        else:
            recompute = True
    return y, p, iteration, parts, lu, settled


def _rms_residuals(eq: CollocationEquations, y: np.ndarray, p: np.ndarray, parts) -> np.ndarray:  # noqa: ANN001
    """RMS over each interval of the relative residual ``|S' - f(t, S)| / (h_r + |f|)`` of the
    cubic ``S``, by 5-point Lobatto quadrature (zero at the ends; the middle is ``1.5 col / h``).

    ``h_r`` (``eq.scale``) is the length of the row's region in the user's variable: the
    measure is then ``|S_x' - f_x| / (1 + |f_x|)`` in the user's variable, the residual of
    ``solve_bvp`` on the problem as written, whatever the mapping onto ``[0, 1]``."""
    col, _, _, _, fm = parts
    r1, f1, r2, f2 = eq.lobatto_residuals(y, p, parts)
    s = eq.scale
    r_mid = np.sum((1.5 * col / eq.h / (s + np.abs(fm))) ** 2, axis=0)
    total = 32 / 45 * r_mid + 49 / 90 * (np.sum((r1 / (s + np.abs(f1))) ** 2, axis=0)
                                         + np.sum((r2 / (s + np.abs(f2))) ** 2, axis=0))
    return np.sqrt(0.5 * total)


def check_by_defect(compiled, x: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray):  # noqa: ANN001, ANN201
    """The error of any solution ``(x, y, p)`` measured by collocation's deferred correction on its mesh.

    The defect of the solution's C1 cubic (values ``y``, slopes from the equations) is solved
    with the collocation Newton matrix at the solution: an estimate of ``y_exact - y`` that
    owes nothing to the method that produced ``y`` (shooting's own estimate re-solves with
    the same segments and shares their bias), and that grows, truthfully, with the
    stability constant of an ill-conditioned problem. Returns ``(estimate, stability
    constant)``, ``(inf, inf)`` when the matrix is singular or the values are not finite.
    """

    with np.errstate(all="ignore"):
        try:
            eq = CollocationEquations(compiled, np.asarray(x, float), k)
            parts = eq.parts(y, p)
            lu = eq.factor(y, p, parts[3])
            fine_x, fine_y, fine_p = eq.defect_correction(y, p, parts, lu)
        except (SingularMatrix, ValueError, np.linalg.LinAlgError):
            return np.inf, np.inf
        if not (np.isfinite(fine_y).all() and np.isfinite(fine_p).all()):
            return np.inf, np.inf
        trial = Trial(compiled, eq.x, y, p, k, 1.0)
        estimate, _ = compare(Outcome(Status.SOLVED, "", eq.x, y, p), Outcome(Status.SOLVED, "", fine_x, fine_y, fine_p),
                              trial)
        return estimate, stability_constant(lu, lu.size, eq.row_scale())


def _not_finite(trial: Trial, x: np.ndarray, y: np.ndarray, p: np.ndarray) -> str | None:
    """Where the Jacobian along ``y`` is first NaN or inf (in the user's words), or None."""
    with np.errstate(all="ignore"):
        jac = np.asarray(trial.compiled.jac(x, y, p, trial.k), float)
    bad = ~np.isfinite(jac.reshape(-1, x.size)).all(axis=0)
    if not bad.any():
        return None
    t = float(x[int(np.argmax(bad))])
    return trial.place(t)


class Collocation(Method):
    name = "collocation"
    summary = "4th-order Lobatto IIIA collocation with residual control and mesh refinement (exact Jacobians)"
    rank = 0
    strengths = frozenset({"layers", "default"})
    # algebraic unknowns: solved inside the compiled callables (the state-space form), so the
    # collocation equations see an ODE; at the stages this is collocation of the DAE itself
    takes = frozenset({"singular_term", "algebraic"})
    order = 4

    def _solve_and_verify(self, trial: Trial) -> Outcome:
        """The base class's solve and error estimate; a miss of the tolerance where the residual
        stopped at the round-off level is :attr:`~bvpkit.status.Status.PRECISION_LIMIT`, with the
        accuracy reached (the error estimate), not a failure to refine."""
        outcome = super()._solve_and_verify(trial)
        state = outcome.workspace
        floor = state.floor if isinstance(state, _State) else 0.0
        estimated = outcome.error_estimate is not None and np.isfinite(outcome.error_estimate)
        missed = outcome.status is Status.ERROR_TOO_LARGE and estimated
        if floor > trial.tol and missed:
            outcome.status = Status.PRECISION_LIMIT
            outcome.message = (
                f"tolerance below what double precision allows here: on {outcome.x.size} nodes the residual "
                f"stops at the round-off level (about {floor:.1g}) and refining would raise it; the accuracy "
                f"reached is about {outcome.error_estimate:.2g} (estimated error), against the tolerance "
                f"{trial.tol:.2g}; " + Status.PRECISION_LIMIT.hint
            )
        elif floor > trial.tol and outcome.ok and estimated:  # only where an estimate was made
            outcome.message = outcome.message.replace(
                "where it misses the tolerance", "in places, and the error estimate meets the tolerance")
        return outcome

    def _solve(self, trial: Trial) -> Outcome:
        c, k = trial.compiled, trial.k
        x, y = np.asarray(trial.x, float), np.array(trial.y, dtype=float)
        p = np.asarray(trial.p, float)
        if x.size < 2 or not np.all(np.diff(x) > 0):
            return Outcome(Status.NOT_CONVERGED, "the starting mesh is not strictly increasing", x, y, p)
        if not (np.isfinite(y).all() and np.isfinite(p).all()):
            return Outcome(Status.NON_FINITE, "the guess holds NaN or inf", x, y, p)
        S = c.singular(p, k)
        if S is not None:  # a singular term needs S y(0) = 0 (solve_bvp's projection)
            y[:, 0] = (np.eye(S.shape[0]) - np.linalg.pinv(S) @ S) @ y[:, 0]
        f0 = c.rhs(x, y, p, k)
        if not np.isfinite(f0).all():
            i, j = np.argwhere(~np.isfinite(f0))[0]
            names = c.layout.row_names
            values = ", ".join(f"{names[r]} = {y[r, j]:.4g}" for r in range(min(len(names), 4)))
            if np.isinf(f0[i, j]):
                # an overflow (exp of a large value) says the guess is far from the solution, not
                # that it left the domain of log or sqrt
                why = ("they overflow: the guess is far from the solution; give a better guess, or continue "
                       "from an easier problem (homotopy)")
            else:
                why = Status.NON_FINITE.hint
            return Outcome(
                Status.NON_FINITE,
                f"the equations give NaN or inf ({'an overflow' if np.isinf(f0[i, j]) else 'NaN'}) for the "
                f"derivative of {names[i]} at "
                f"{trial.place(x[j])} with the guess ({values}): {why}",
                x,
                y,
                p,
            )
        return self._lobatto(trial, x, y, p)

    def _lobatto(self, trial: Trial, x: np.ndarray, y: np.ndarray, p: np.ndarray) -> Outcome:
        tol = max(trial.tol, TOL_FLOOR)
        iterations, rms, code, rounds = 0, None, 3, 0
        floor = 0.0  # the largest residual of this round left unrefined at the round-off level
        unsettled: list[int] = []  # meshes on which Newton did not converge
        crawl = 0  # rounds in a row that added almost no nodes beside intervals at the round-off floor
        ever_settled, settled = False, True
        while True:  # ends: nodes are added each round until the residual is met or max_nodes is hit
            rounds += 1
            if trial.out_of_time():
                return Outcome(Status.NOT_CONVERGED, f"stopped after {iterations} Newton iterations on {x.size} nodes: "
                               "the time budget of this attempt is spent; " + Status.NOT_CONVERGED.hint,
                               x, y, p, iterations=iterations)
            eq = CollocationEquations(trial.compiled, x, trial.k)
            try:
                y, p, used, parts, lu, settled = _newton(eq, y, p, tol)
            except SingularMatrix:
                where = _not_finite(trial, x, y, p)
                if where is not None:
                    return Outcome(Status.NON_FINITE, f"the Jacobian of the equations is not finite at {where} "
                                   "(a term like sqrt(y) or log(y) where y = 0?); give a guess inside the domain "
                                   "of the equations there, or write the problem so that its derivatives stay "
                                   "finite", x, y, p, iterations=iterations)
                code = 2
                break
            iterations += used
            if settled:
                ever_settled = True
            else:
                unsettled.append(x.size)
                if not ever_settled and trial.patience is not None and len(unsettled) >= trial.patience:
                    meshes = " and ".join(str(m) for m in unsettled)
                    return Outcome(
                        Status.NOT_CONVERGED,
                        f"Newton's method did not converge on the meshes of {meshes} nodes: the guess is far "
                        "from a solution, and adding nodes does not bring it closer; "
                        + Status.NOT_CONVERGED.hint,
                        x, y, p, iterations=iterations)
            if not (np.isfinite(y).all() and np.isfinite(p).all()):
                return Outcome(Status.NON_FINITE, "Newton's method ran into NaN or inf; " + Status.NON_FINITE.hint,
                               x, y, p, iterations=iterations)
            rms = _rms_residuals(eq, y, p, parts)
            if not np.isfinite(rms).all():
                return Outcome(Status.NON_FINITE, "the residual holds NaN or inf; " + Status.NON_FINITE.hint,
                               x, y, p, iterations=iterations)
            wanted, floor = rms, 0.0
            over = np.flatnonzero(rms > tol)
            if over.size:
                # intervals whose residual is already at the round-off level: refining them
                # would raise their floor (~ 1/h), not lower the residual
                noisy = over[rms[over] <= _roundoff_floor(eq, y, p, parts, over)]
                if noisy.size:
                    floor = float(np.max(rms[noisy]))
                    wanted = rms.copy()
                    wanted[noisy] = 0.0
            # the predicted factor reads the residual of a solution of this mesh's equations; an
            # iterate Newton did not settle predicts nothing: one or two nodes per interval then
            pieces = _pieces(wanted, tol) if settled else np.where(wanted >= 100 * tol, 3, np.where(wanted > tol, 2, 1))
            added = int(np.sum(pieces - 1))
            if x.size + added > trial.max_nodes:
                code = 1
                break
            if added:
                # rounds that add almost nothing while the rest of the residual sits at the round-off
                # floor do not converge (seen: thousands of such rounds on an ill-conditioned problem)
                crawl = crawl + 1 if floor > 0 and added < _CRAWL * x.size else 0
                if crawl >= _CRAWL_ROUNDS:
                    code = 4
                    break
                spline = Hermite(x, y, parts[2])
                x = _split(x, pieces)
                y = spline(x)
                continue
            if np.max(np.abs(parts[1]), initial=0.0) <= tol:
                code = 0
                break
            if rounds >= _ROUNDS:  # the residual is met but the conditions are not: Newton again, within limits
                break
        outcome = self._outcome(trial, code, x, y, p, iterations, rms, settled, rounds)
        if code == 0:
            outcome.workspace = _State(eq, parts, lu, floor)  # for the error estimate
            if floor > tol:
                outcome.message += (f"; the residual is at the round-off level (about {floor:.1g}) where it "
                                    "misses the tolerance")
        return outcome

    def _outcome(self, trial: Trial, code: int, x, y, p, iterations: int, rms,  # noqa: ANN001
                 settled: bool = True, meshes: int = 1) -> Outcome:
        status = _STATUS.get(code, Status.NOT_CONVERGED)
        if status is Status.SOLVED:
            # the iterations of every mesh refined on the way (a linear problem takes one or two on
            # each): the count alone read as if Newton had struggled
            on = f"over {meshes} meshes, the last of {x.size} nodes" if meshes > 1 else f"on {x.size} nodes"
            message = f"converged in {iterations} Newton iteration{'s' if iterations != 1 else ''} {on}"
        elif status is Status.MESH_LIMIT and not settled:
            # the residual that drove the refinement is that of an iterate, not of a solution:
            # no layer can be read from it
            message = (
                f"mesh limit reached ({trial.max_nodes} nodes) with Newton's method not converged on the "
                "last mesh: the guess may be far from a solution, or there may be no solution near it; give "
                "a better guess, or trace the solution from an easier value of a constant"
            )
        elif status is Status.MESH_LIMIT:
            message = (
                f"mesh limit reached ({trial.max_nodes} nodes):"
                f"{_trouble(x, rms, trial.place, trial.tol)} raise "
                "max_nodes, loosen tol or give a better guess"
            )
        elif code == 4:
            status = Status.PRECISION_LIMIT
            message = (
                f"tolerance below what double precision allows here: on {x.size} nodes the residual is at "
                f"the round-off level (about {_floor_words(rms, trial.tol)}) in places, and {_CRAWL_ROUNDS} "
                "rounds in a row refined only a few intervals elsewhere without meeting the tolerance; "
                + Status.PRECISION_LIMIT.hint
            )
        elif status is Status.SINGULAR:
            message = "the collocation Newton matrix is singular; " + status.hint
        else:
            message = "Newton's method did not meet the boundary-condition tolerance; " + status.hint
        return Outcome(status, message, x, y, p, iterations=int(iterations),
                       resolution=(status is Status.MESH_LIMIT and settled) or code == 4)

    def _refine(self, trial: Trial, outcome: Outcome) -> Outcome:
        """A more accurate solution for the error estimate: the deferred correction of the
        solution (``CollocationEquations.defect_correction``: one solve with the last Newton matrix); the
        stability constant comes from the same LU, rows in derivative units. An outcome
        without that workspace (from elsewhere) is re-solved on the halved mesh."""
        state = outcome.workspace
        if not isinstance(state, _State) or state.equations.m != outcome.x.size:
            return self._halved(trial, outcome)
        x, y, p = state.equations.defect_correction(outcome.y, outcome.p, state.parts, state.lu)
        result = Outcome(Status.SOLVED, "deferred correction", x, y, p, iterations=0)
        result.condition = stability_constant(state.lu, state.lu.size, state.equations.row_scale())
        return result

    def _halved(self, trial: Trial, outcome: Outcome) -> Outcome:
        """The solution on the halved mesh, started from ``outcome``."""
        x = outcome.x
        fine = np.unique(np.concatenate([x, 0.5 * (x[1:] + x[:-1])]))
        y = hermite(trial.compiled, x, outcome.y, outcome.p, trial.k)(fine)
        refined = dataclasses.replace(trial, x=fine, y=y, p=outcome.p, max_nodes=max(trial.max_nodes, 2 * fine.size))
        return self._lobatto(refined, fine, y, np.asarray(outcome.p, float))
