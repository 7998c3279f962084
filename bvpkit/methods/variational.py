"""Single shooting's inner loop: one point at a time, and Broyden's updates between sensitivities.

An explicit integrator calls the right-hand side one point at a time, thousands of times per
solve; the standard form's callables are written for a mesh (``(n, m)`` arrays, their output
shape broadcast from the arguments on every call), which costs more per call than the
arithmetic of a small system. :class:`PointSystem` builds the same programs for one point
(no mesh axis), and :func:`fused_rhs` is the variational system of states and sensitivities
(``Phi' = J Phi``, ``Psi' = J Psi + f_p``) as one function over one flat vector.

:func:`secant_newton` is Newton's method on single shooting's boundary residual in which the
exact sensitivities are integrated only where they are needed: at the start (or never, when
a previous solve's matrix is handed over, as for the error estimate's tighter re-solve), and
again when Broyden's rank-one updates (Broyden 1965, Math. Comp. 19) stop reducing the
residual. Every other trial integrates the states alone.
"""

from __future__ import annotations

import dataclasses
import math
import weakref
from collections.abc import Callable

import numpy as np

from ..programs.compiled import CompiledSystem
from ..programs.program import build
from ..status import Status
from .base import Outcome, Trial
from .features import pieces

# what shooting and these paths share: limits of an integration and the records of its result
_MAX_NEWTON = 40
_MIN_STEP = 1.0 / 256  # smallest line-search step before giving up
_BLOWUP = 1e150  # a state this large is a blow-up, not a solution
_MAX_CALLS = 60_000  # right-hand-side calls per integration (~5000 DOP853 steps): bounds time and memory


class _BlowUp(Exception):
    def __init__(self, x: float, state: int, what: str, segment: int = -1):
        super().__init__(what)
        self.x, self.state, self.what, self.segment = x, state, what, segment


@dataclasses.dataclass
class _Flow:
    """Result of integrating every segment from given node states."""
    ends: np.ndarray  # (n, M) states at the segment ends
    phi: np.ndarray  # (n, n, M)
    psi: np.ndarray  # (n, n_p, M)
    dense: object  # OdeSolution of the stacked system (or None)
    max_growth: np.ndarray  # (M,) max |Phi| per segment



_POINT: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()
_POINT_FUNCTIONS = ("rhs", "jac", "pjac")
# Broyden's matrix is refreshed by an exact integration of the sensitivities when a step it
# gave reduced the residual by less than this factor (a fresh Jacobian converges faster).
_SLOW = 0.5
MAX_BROYDEN = 64  # unknowns: above this a dense rank-one update costs more than it saves


class PointSystem:
    """``rhs``, ``jac`` and ``pjac`` of a system at one point: ``(x, y (n,), p, k)`` to ``(n,)``,
    ``(n, n)``, ``(n, n_p)``.

    Built from the system's own programs with no mesh axis (:func:`bvpkit.programs.program.build`:
    the same printer and source check); views that are not a plain compiled system (a
    singular term, constants freed by continuation) call their mesh functions on one column.
    """

    def __init__(self, compiled):  # noqa: ANN001

        programs = {prog["name"]: prog for prog in getattr(compiled, "programs", ())}
        if type(compiled) is CompiledSystem and not compiled.layout.singular and all(
                name in programs for name in _POINT_FUNCTIONS):

            built = build([{**programs[name], "mesh": None} for name in _POINT_FUNCTIONS])
            self.rhs, self.jac, self.pjac = (built[name] for name in _POINT_FUNCTIONS)
        else:
            self.rhs = lambda x, y, p, k: compiled.rhs(np.atleast_1d(x), y[:, None], p, k)[:, 0]  # noqa: E731
            self.jac = lambda x, y, p, k: compiled.jac(np.atleast_1d(x), y[:, None], p, k)[:, :, 0]  # noqa: E731
            self.pjac = lambda x, y, p, k: compiled.pjac(np.atleast_1d(x), y[:, None], p, k)[:, :, 0]  # noqa: E731


def point_system(compiled) -> PointSystem:  # noqa: ANN001
    """The :class:`PointSystem` of ``compiled``, built once per system object."""
    found = _POINT.get(compiled)
    if found is None:
        found = _POINT[compiled] = PointSystem(compiled)
    return found


def fused_rhs(point: PointSystem, p: np.ndarray, k: np.ndarray, n: int, n_p: int, sensitivities: bool,
              limit: int, trouble: Callable[[float, np.ndarray, np.ndarray, int], None]) -> Callable:
    """The right-hand side ``(x, z) -> dz/dx`` of the states, or of the variational system.

    With ``sensitivities`` the flat vector holds the states, then per state row ``i`` the row
    ``i`` of ``Phi`` and of ``Psi`` side by side (as :meth:`Shooting._flow` lays them out).
    One cheap test per call (a dot product is finite only when every term is, and overflows
    once the slopes pass 1e154, about where a trajectory blows up) and a count of calls;
    ``trouble(x, y, f, calls)`` is called when either fails, and raises when something is
    wrong.
    """
    rhs, jac, pjac = point.rhs, point.jac, point.pjac
    width = n + n_p
    calls = [0]

    if not sensitivities:
        def states(x, y):  # noqa: ANN001, ANN202
            f = rhs(x, y, p, k)
            calls[0] += 1
            if not math.isfinite(f.dot(f)) or calls[0] > limit:
                trouble(x, y, f, calls[0])
            return f

        return states

    def variational(x, z):  # noqa: ANN001, ANN202
        y = z[:n]
        f = rhs(x, y, p, k)
        calls[0] += 1
        if not math.isfinite(f.dot(f)) or calls[0] > limit:
            trouble(x, y, f, calls[0])
        d = jac(x, y, p, k) @ z[n:].reshape(n, width)
        if n_p:
            d[:, n:] += pjac(x, y, p, k)
        out = np.empty(z.size)
        out[:n] = f
        out[n:] = d.ravel()
        return out

    return variational


class _InTau:
    """A dense output in ``x`` on ``[t0, t0 + h]`` read in ``tau = (x - t0) / h`` (what the flows give)."""
    def __init__(self, solution, t0: float, h: float):  # noqa: ANN001
        self.solution, self.t0, self.h = solution, t0, h
        self.ts = (np.asarray(solution.ts) - t0) / h

    def __call__(self, tau):  # noqa: ANN001, ANN204
        return dense_values(self.solution, self.t0 + np.asarray(tau, float) * self.h)


@dataclasses.dataclass
class Secant:
    """What a converged single-shooting solve hands to its error estimate: its last Newton
    matrix, and how much its last exact sensitivities grew (``max |Phi|`` at the far end)."""

    matrix: np.ndarray
    growth: float


def reference(shooting, trial: Trial, nodes: np.ndarray, s: np.ndarray, p: np.ndarray, rtol: float,  # noqa: ANN001
              secant: Secant, x: np.ndarray, tol: float) -> Outcome:
    """The error estimate's reference for a converged single-shooting solve on mesh ``x``.

    One integration with the tighter ``rtol`` from the solve's start ``s``, ``p``, and one
    Newton step with the solve's own matrix: when that step, times the growth of the
    sensitivities, moves the trajectory by less than a hundredth of the tolerance ``tol``
    the tighter trajectory itself is the reference (a second integration after the step
    otherwise, and full Newton iterations if that one still moves). The reference holds the
    states on the halved mesh of ``x`` (what :func:`~bvpkit.methods.base.compare` reads).
    """
    from scipy.linalg import lu_factor, lu_solve


    c, n = trial.compiled, trial.compiled.n
    halved = np.empty(2 * x.size - 1)
    halved[::2], halved[1::2] = x, 0.5 * (x[1:] + x[:-1])
    u = np.concatenate([s[:, 0], p])
    enough = 0.01 * tol / max(1.0, secant.growth)  # a start error this small moves the trajectory < tol / 100
    try:
        for _ in range(2):
            flow = one_segment_flow(trial, nodes, u[:n, None], u[n:], rtol, True, False)
            r = c.bc(u[:n], flow.ends[:, -1], u[n:], trial.k)
            step = _solve(lu_factor, lu_solve, secant.matrix, -r)
            if step is None:
                break
            if float(np.max(np.abs(step) / (1.0 + np.abs(u)), initial=0.0)) <= enough:
                return _finish(shooting, trial, nodes, u, n, rtol, 1, secant, halved, flow)
            u = u + step
    except _BlowUp:
        pass
    return secant_newton(shooting, trial, nodes, s, p, rtol, secant, halved)


def secant_newton(shooting, trial: Trial, nodes: np.ndarray, s: np.ndarray, p: np.ndarray, rtol: float,  # noqa: ANN001
                  start: Secant | None = None, at: np.ndarray | None = None) -> Outcome:
    """Newton's method on the boundary residual of one segment, the matrix kept by Broyden's updates.

    ``shooting`` is the :class:`~bvpkit.methods.shooting.Shooting` method (its finish and
    its messages); ``s`` is ``(n, 1)``; ``start`` the matrix of a nearby solve to start
    from (None: integrate the sensitivities first). The converged outcome keeps its last
    matrix in its workspace for the error estimate's re-solve. With ``at`` (points of ``t``)
    the converged trajectory is given at those points alone, with no output mesh of its
    own: what the error estimate compares (:func:`~bvpkit.methods.base.compare` on the
    halved mesh of the solve it checks).
    """
    from scipy.linalg import lu_factor, lu_solve


    c, k = trial.compiled, trial.k
    n, n_p = c.n, c.n_parameters
    x_guess, y_guess = np.asarray(trial.x, float), np.asarray(trial.y, float)
    small = trial.tol * 1e-2  # a Newton step this small (relative) has converged

    def failure(status: Status, message: str, iterations: int) -> Outcome:
        return Outcome(status, message, x_guess, y_guess, np.asarray(trial.p, float), iterations=iterations)

    def residual(u: np.ndarray, sensitivities: bool, dense: bool = False):  # noqa: ANN202
        nonlocal growth
        begin, q = u[:n, None], u[n:]
        flow = one_segment_flow(trial, nodes, begin, q, rtol, dense, sensitivities)
        r = c.bc(begin[:, 0], flow.ends[:, -1], q, k)
        if not sensitivities:
            return r, None, flow
        growth = float(flow.max_growth[0])
        a, b, dp = c.bc_jac(begin[:, 0], flow.ends[:, -1], q, k)
        matrix = a + b @ flow.phi[:, :, -1]
        if n_p:
            matrix = np.hstack([matrix, b @ flow.psi[:, :, -1] + np.reshape(dp, (b.shape[0], -1))])
        return r, matrix, flow

    def solve(matrix: np.ndarray, rhs: np.ndarray) -> np.ndarray | None:
        return _solve(lu_factor, lu_solve, matrix, rhs)

    def relative(step: np.ndarray, u: np.ndarray) -> float:
        return float(np.max(np.abs(step) / (1.0 + np.abs(u)))) if step.size else 0.0

    u = np.concatenate([s[:, 0], p])
    fresh = start is None
    growth = 1.0 if start is None else start.growth
    try:
        r, matrix, _ = residual(u, fresh)
    except _BlowUp as err:
        return failure(Status.INTEGRATION_FAILED, shooting._blowup_message(trial, err, "from the guess"), 0)
    if not fresh:
        matrix = np.array(start.matrix, float)
    iterations, last_size = 0, math.inf
    while iterations < _MAX_NEWTON:
        if trial.out_of_time():
            return failure(Status.NOT_CONVERGED, f"stopped after {iterations} Newton iterations: the time budget of "
                           "this attempt is spent; " + Status.NOT_CONVERGED.hint, iterations)
        norm = float(np.max(np.abs(r))) if r.size else 0.0
        if not (np.isfinite(matrix).all() and math.isfinite(norm)):
            return failure(Status.NON_FINITE, "the shooting residual or its Jacobian is NaN or inf", iterations)
        step = solve(matrix, -r)
        if step is None and not fresh:  # Broyden's matrix went singular: start again from the exact one
            matrix, fresh = _exact(residual, u), True
            if matrix is None:
                return failure(Status.INTEGRATION_FAILED, "integration failed while computing sensitivities",
                               iterations)
            continue
        if step is None:
            return failure(Status.SINGULAR, "the shooting Newton matrix is singular; " + Status.SINGULAR.hint,
                           iterations)
        iterations += 1
        size = relative(step, u)
        # converged after this step if it is tiny, or (Deuflhard's estimate) the next one,
        # contraction times this one, is tiny while contracting fast: then the trial keeps
        # its dense output, which the finish needs, instead of integrating once more
        rate = size / last_size
        final = size <= small or (0 < rate < 0.1 and rate * size <= small)
        lam, accepted, last_error, flow = 1.0, False, None, None
        while lam >= _MIN_STEP:
            trial_u = u + lam * step
            try:
                r_new, _, flow = residual(trial_u, False, dense=final and lam == 1.0)
            except _BlowUp as err:
                last_error = err
                lam *= 0.5
                continue
            norm_new = float(np.max(np.abs(r_new))) if r_new.size else 0.0
            if math.isfinite(norm_new) and (norm_new <= (1 - 0.25 * lam) * norm or size < small or norm_new < 1e-14):
                accepted = True
                break
            lam *= 0.5
            if not fresh:  # Broyden's direction is poor: refresh the matrix rather than search along it
                break
        if not accepted:
            if not fresh:
                matrix, fresh = _exact(residual, u), True
                if matrix is None:
                    return failure(Status.INTEGRATION_FAILED, "integration failed while computing sensitivities",
                                   iterations)
                continue
            if norm <= 10 * rtol:  # already at the integrator's noise level: converged
                return _finish(shooting, trial, nodes, u, n, rtol, iterations, Secant(matrix, growth), at, None)
            if last_error is not None:
                return failure(Status.INTEGRATION_FAILED,
                               shooting._blowup_message(trial, last_error, "at every trial step of Newton's method"),
                               iterations)
            return failure(Status.NOT_CONVERGED,
                           f"the line search could not reduce the boundary residual ({norm:.3g}) after "
                           f"{iterations} Newton iterations; " + Status.NOT_CONVERGED.hint, iterations)
        du, dr = trial_u - u, r_new - r
        u, r = trial_u, r_new
        last_size = size
        if lam == 1.0 and final:
            return _finish(shooting, trial, nodes, u, n, rtol, iterations, Secant(matrix, growth), at, flow)
        if norm_new > _SLOW * norm and not fresh:  # Broyden's updates stall: an exact matrix instead
            matrix, fresh = _exact(residual, u), True
            if matrix is None:
                return failure(Status.INTEGRATION_FAILED, "integration failed while computing sensitivities",
                               iterations)
            continue
        # Broyden's "good" update: the matrix maps this step onto the change of residual it made
        matrix = matrix + np.outer(dr - matrix @ du, du) / float(du @ du)
        fresh = False
    return failure(Status.NOT_CONVERGED,
                   f"Newton's method did not converge in {_MAX_NEWTON} iterations; " + Status.NOT_CONVERGED.hint,
                   iterations)


def _solve(lu_factor, lu_solve, matrix: np.ndarray, rhs: np.ndarray) -> np.ndarray | None:  # noqa: ANN001
    """``matrix^-1 rhs``, or None when the matrix is singular (an exact zero pivot, or a step not finite)."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            lu = lu_factor(matrix, check_finite=False)
        except (ValueError, np.linalg.LinAlgError):
            return None
    if not np.all(np.diag(lu[0])):
        return None
    step = lu_solve(lu, rhs, check_finite=False)
    return step if np.all(np.isfinite(step)) else None


def _exact(residual, u: np.ndarray) -> np.ndarray | None:  # noqa: ANN001
    """The exact shooting matrix at ``u`` (an integration of the sensitivities), or None if it blew up."""
    try:
        return residual(u, True)[1]
    except _BlowUp:
        return None


def _finish(shooting, trial: Trial, nodes: np.ndarray, u: np.ndarray, n: int, rtol: float, iterations: int,  # noqa: ANN001
            secant: Secant, at: np.ndarray | None, flow) -> Outcome:  # noqa: ANN001
    """The converged outcome: the method's output mesh, or the trajectory at ``at`` alone."""
    if at is None:
        outcome = shooting._finish(trial, nodes, u[:n, None], u[n:], rtol, False, iterations, None, flow=flow)
        if outcome.ok:
            outcome.workspace.secant = secant
        return outcome

    try:
        if flow is None or flow.dense is None:
            flow = one_segment_flow(trial, nodes, u[:n, None], u[n:], rtol, True, False)
    except _BlowUp as err:  # pragma: no cover - the same integration just succeeded
        return Outcome(Status.INTEGRATION_FAILED, str(err), trial.x, trial.y, u[n:], iterations=iterations)
    end = flow.ends[:, -1]
    r = trial.compiled.bc(u[:n], end, u[n:], trial.k)
    size = 1.0 + max(float(np.max(np.abs(u[:n]))), float(np.max(np.abs(end))))
    miss = float(np.max(np.abs(r))) / size if r.size else 0.0
    if not miss <= 10 * trial.tol:
        return Outcome(Status.NOT_CONVERGED, f"Newton's steps stalled with the conditions missed by {miss:.2g}",
                       trial.x, trial.y, trial.p, iterations=iterations)
    tau = np.clip((at - nodes[0]) / (nodes[-1] - nodes[0]), 0.0, 1.0)
    return Outcome(Status.SOLVED, f"converged in {iterations} Newton iterations", at, dense_values(flow.dense, tau),
                   u[n:], iterations=iterations)


def one_segment_flow(trial: Trial, nodes: np.ndarray, s: np.ndarray, p: np.ndarray, rtol: float, dense: bool,
                     sensitivities: bool, max_step: float = np.inf):
    """:meth:`Shooting._flow` for one segment and an explicit integrator, on :func:`fused_rhs`
    (``max_step`` in the segment variable ``tau``, as there)."""
    from scipy.integrate import solve_ivp


    c, k = trial.compiled, trial.k
    n, n_p = c.n, c.n_parameters
    t0, h = float(nodes[0]), float(nodes[-1] - nodes[0])
    start = np.zeros(n + (n * (n + n_p) if sensitivities else 0))
    start[:n] = s[:, 0]
    if sensitivities:
        start[n:].reshape(n, n + n_p)[np.arange(n), np.arange(n)] = 1.0

    def trouble(x, y, f, calls):  # noqa: ANN001, ANN202
        if calls > _MAX_CALLS:
            raise _BlowUp(float(x), -1, f"the integration needed more than {_MAX_CALLS} evaluations (the "
                          "step size is collapsing or the problem is too stiff)")
        if not np.all(np.isfinite(f)):
            raise _BlowUp(float(x), int(np.argmax(~np.isfinite(f))), "the right-hand side became NaN or inf", 0)
        if np.abs(y).max() >= _BLOWUP:
            raise _BlowUp(float(x), int(np.argmax(np.abs(y))), "the trajectory blew up", 0)

    # integrated in the standard variable itself: the same steps as in tau, no scaling per call
    fun = fused_rhs(point_system(c), np.asarray(p, float), np.asarray(k, float), n, n_p, sensitivities, _MAX_CALLS,
                    trouble)
    parts = [(t0 + a * h, t0 + b * h, step * h) for a, b, step in pieces(trial.features, np.array([t0]), np.array([h]))]
    result = integrate(solve_ivp, fun, (t0, t0 + h), start,
                       dict(method="DOP853", rtol=rtol, atol=rtol, dense_output=dense, max_step=max_step * h), parts)
    if result.status != 0:
        where = float(result.t[-1]) if result.t.size else t0
        raise _BlowUp(where, -1, f"the integrator's step size collapsed ({result.message.rstrip('.')})")
    end = result.y[:, -1]
    if not np.abs(end[:n]).max() < _BLOWUP:  # grew past the limit with slopes still below the test's
        raise _BlowUp(t0 + h, int(np.argmax(~(np.abs(end[:n]) < _BLOWUP))), "the trajectory blew up", 0)
    if sensitivities:
        sens = end[n:].reshape(n, n + n_p, 1)
        phi, psi = sens[:, :n], sens[:, n:]
        growth = np.abs(phi).reshape(n * n, 1).max(axis=0)
    else:
        phi, psi, growth = np.zeros((n, n, 1)), np.zeros((n, n_p, 1)), np.ones(1)
    return _Flow(end[:n, None], phi, psi, _InTau(result.sol, t0, h) if dense else None, growth)


def dense_values(solution, t: np.ndarray) -> np.ndarray:
    """``solution(t)`` of an integrator's dense output, shape ``(size, t.size)``, in one vectorised pass.

    SciPy's ``OdeSolution`` evaluates its step polynomials one step at a time in Python;
    for DOP853 (whose step polynomials are in nested form, coefficients ``F``) the steps
    are stacked once and every point evaluated at once. Any other dense output is called as
    it is.
    """
    t = np.asarray(t, float)
    if isinstance(solution, _InTau):
        return solution(t)
    stacked = getattr(solution, "_stacked_steps", None)
    if stacked is None:
        parts = getattr(solution, "interpolants", None)
        if not parts or not all(hasattr(q, "F") and hasattr(q, "y_old") and hasattr(q, "t_old") for q in parts) or \
                not getattr(solution, "ascending", True):
            return solution(t)
        starts = np.array([q.t_old for q in parts])
        lengths = np.array([q.h for q in parts])
        coefficients = np.stack([np.asarray(q.F)[::-1] for q in parts])  # (steps, order, size), last first
        old = np.stack([q.y_old for q in parts])  # (steps, size)
        stacked = (starts, lengths, coefficients, old)
        solution._stacked_steps = stacked  # kept with the dense output it was made from
    starts, lengths, coefficients, old = stacked
    flat = t.ravel()
    step = np.clip(np.searchsorted(starts, flat, side="right") - 1, 0, starts.size - 1)
    u = ((flat - starts[step]) / lengths[step])[:, None]
    values = np.zeros((flat.size, old.shape[1]))
    for i in range(coefficients.shape[1]):  # the nested form of Dop853DenseOutput
        values += coefficients[step, i]
        values *= u if i % 2 == 0 else 1.0 - u
    values += old[step]
    return values.T


def subdivide(x: np.ndarray, bad: np.ndarray, factor: np.ndarray) -> np.ndarray:
    """``x`` with each interval ``i`` where ``bad`` split into ``ceil(factor_i)`` equal parts (at most 16).

    ``factor`` is the predicted ratio of an interval's length to the one that meets the
    tolerance (the fourth root of the interpolant's miss over its target, for a cubic), so
    one pass usually places every node a tolerance needs.
    """
    pieces = np.clip(np.ceil(np.where(np.isfinite(factor), factor, 16.0) * 1.05), 2, 16).astype(int)
    lows, widths = x[:-1], np.diff(x)
    added = [(lows[bad & (pieces == q)][:, None] + widths[bad & (pieces == q)][:, None] * (np.arange(1, q) / q)).ravel()
             for q in np.unique(pieces[bad])]
    return np.sort(np.concatenate([x, *added]))


def integrate(solve_ivp, fun, span: tuple[float, float], start: np.ndarray, options: dict, parts: list):  # noqa: ANN001, ANN202
    """``solve_ivp`` over ``span`` in the pieces ``(a, b, max_step)`` of
    :func:`bvpkit.methods.features.pieces` (in the same variable): restarted at each corner of the
    equations, and with steps no longer than a narrow feature's width across it (an integrator
    that steps over a feature never sees it). One call when there is one piece; otherwise the
    pieces' results joined into one (their dense outputs too)."""
    if len(parts) <= 1:
        return solve_ivp(fun, span, start, **options)
    from types import SimpleNamespace

    from scipy.integrate import OdeSolution

    times, states, solutions = [np.array([span[0]], float)], [start[:, None]], []
    result = None
    for a, b, step in parts:
        chosen = dict(options, max_step=min(options.get("max_step", np.inf), step))
        result = solve_ivp(fun, (a, b), start, **chosen)
        if result.status != 0:
            result.t = np.concatenate([*times, result.t])
            return result
        times.append(result.t[1:])
        states.append(result.y[:, 1:])
        if options.get("dense_output"):
            solutions.append(result.sol)
        start = result.y[:, -1]
    sol = None
    if solutions:
        ts = np.concatenate([solutions[0].ts, *(s.ts[1:] for s in solutions[1:])])
        sol = OdeSolution(ts, [piece for s in solutions for piece in s.interpolants])
    return SimpleNamespace(status=0, message=result.message, t=np.concatenate(times),
                           y=np.concatenate(states, axis=1), sol=sol)
