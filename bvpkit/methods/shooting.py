"""Shooting with exact sensitivities: the engine behind single and multiple shooting.

The interval is split at nodes ``t_0 = a < t_1 < ... < t_M = b``; segment ``j`` is mapped
onto ``tau in [0, 1]`` (``x = t_j + tau h_j``), so every segment is integrated in **one**
vectorised ``solve_ivp`` call: the stacked state holds, per segment, the states ``y``, the
sensitivities ``Phi = dy/ds`` (``Phi' = J Phi``, ``Phi(0) = I``) and ``Psi = dy/dp``
(``Psi' = J Psi + f_p``, ``Psi(0) = 0``), with ``J`` and ``f_p`` the exact Jacobians from
codegen. The unknowns are the states at the nodes and the parameters; the equations are
continuity at interior nodes and the boundary conditions. Newton's method on them uses the
block structure (``discrete.factor_blocks``: a banded LU of the bordered block-bidiagonal
matrix, never a dense solve of the whole system), with a backtracking line search.

Single shooting is the case ``M = 1`` (Keller 1968, *Numerical Methods for Two-Point
Boundary-Value Problems*); multiple shooting chooses ``M`` from the growth of the
sensitivities along the guess and splits a segment whose sensitivity grows too much
(Stoer and Bulirsch, *Introduction to Numerical Analysis*, section 7.3.5).

Integrators: DOP853 (explicit, order 8; Hairer, Norsett and Wanner) for non-stiff problems,
Radau IIA (implicit, order 5) when the Jacobian's eigenvalues say the problem is stiff.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import scipy.sparse as sparse

from ..status import Status
from . import variational
from .base import Method, Outcome, Trial
from .collocation import check_by_defect
from .diagnostics import crossings, hermite, survey
from .discrete import SingularMatrix, factor_blocks
from .features import pieces
from .variational import _BLOWUP, _MAX_CALLS, _MAX_NEWTON, _MIN_STEP, _BlowUp, _Flow

# Integration tolerance relative to the tolerance asked: the integrator's local control
# leaves a global error of a few times its rtol on smooth problems.
_IVP_SHARE = 0.1
_IVP_FLOOR = 1e-13  # DOP853 refuses rtol below 100 * machine epsilon
# One segment integrates the whole interval: DOP853's global error there was 25 times its rtol
# (Blasius on [0, 10]), so a tenth of the tolerance missed it and cost a second, tightened
# solve; a hundredth costs 10**(1/8) = 1.33 times the steps of an order-8 method.
_ONE_SEGMENT_SHARE = 0.01
_STIFF = 2000.0  # max |Re eig J| * length above which an implicit integrator is used
_SEGMENT_LOG_GROWTH = math.log(20.0)  # target sensitivity growth per segment (along the guess)
_SPLIT_GROWTH = 1e6  # a segment whose sensitivities grow more than this is split
_MAX_SEGMENTS = 400


# Below this integration tolerance the refined re-solve of the error estimate cannot be 100 times
# tighter (the floor above), so it shares the dense output's error between steps and cannot see
# it: the dense output is then checked on its own (Shooting._dense).
_DENSE_CHECK = 100 * _IVP_FLOOR
_EPS = 2.2e-16  # machine epsilon: a stability constant times it bounds the accuracy any method can reach
_ILL = (": the problem is so ill-conditioned that double precision cannot reach the tolerance, whatever the "
        "method")


@dataclasses.dataclass
class _State:
    """What a converged shooting solve keeps for its refined re-solve: its segments' nodes and
    whether it integrated with the implicit method; and its dense output (``states(points)``,
    the solution between the nodes as the integrator computed it), for checks on other meshes."""

    nodes: np.ndarray
    stiff: bool
    states: object = None
    secant: object = None  # single shooting: its last Newton matrix (a variational.Secant)


class Shooting(Method):
    """Shared engine; subclasses fix how segments are chosen."""

    # takes no singular term: the sensitivities of a start off S y(0) = 0 blow up at t = 0;
    # algebraic unknowns are solved inside the compiled right-hand side at every step (the
    # state-space form), so the integrator sees an ODE
    takes = frozenset({"algebraic"})

    fixed_segments: int | None = None  # 1 for single shooting

    # -- the method contract ------------------------------------------------------------
    def _solve_and_verify(self, trial: Trial) -> Outcome:
        """The base class's solve and estimate, then a check that does not share shooting's bias.

        The estimate of the base class re-solves with a tighter integrator on the same
        segments; on an ill-conditioned problem both solves carry the same amplified
        integration error and agree (seen: an estimate of 1e-13 on a true error of 10). The
        deferred correction of collocation on the output mesh
        (:func:`~bvpkit.methods.collocation.check_by_defect`) measures the assembled
        solution's defect through the problem's own linearisation instead; the larger of the
        two estimates is kept, and success needs both within the tolerance.
        """
        outcome = super()._solve_and_verify(trial)
        if not (trial.verify and outcome.status in (Status.SOLVED, Status.ERROR_TOO_LARGE)):
            return outcome
        check, condition = self._check(trial, outcome)
        if condition is not None and math.isfinite(condition):
            outcome.condition = condition
        own = outcome.error_estimate if outcome.error_estimate is not None else 0.0
        outcome.error_estimate = max(own, check)
        if not outcome.ok and check > own:
            outcome.message += f"; a check of the assembled solution by deferred correction gives an error of {check:.2g}"
        if outcome.ok and not check <= trial.tol:
            outcome.status = Status.ERROR_TOO_LARGE
            shown = f"{condition:.2g}" if condition is not None and math.isfinite(condition) else "infinite"
            outcome.message = (
                f"{outcome.message}, but a check of the assembled solution by deferred correction on its mesh "
                f"gives an error of {check:.2g}, above the tolerance {trial.tol:.2g} (the problem's stability "
                f"constant is {shown}{_ILL if condition is None or not condition * _EPS <= trial.tol else ''}); "
                + Status.ERROR_TOO_LARGE.hint
            )
        return outcome

    def _check(self, trial: Trial, outcome: Outcome) -> tuple[float, float | None]:
        """The deferred-correction check of ``outcome`` (``(estimate, stability constant)``), on
        a mesh fit for it before it may fail the answer.

        The check is collocation's: on the output mesh, which was built to carry the
        integrator's solution, not for a fourth-order defect, part of what it reports is its own
        discretisation error. Where it misses the tolerance, the mesh is halved with values from
        the integrator's dense output (the method's own solution, not an interpolant), up to
        twice and within ``max_nodes``; the answer is then given on the finer mesh. A figure at
        the check's round-off floor (measured: the change of the check under a perturbation of
        the values by round-off) says nothing against the answer; the method's own estimate
        decides there.
        """
        c, k = trial.compiled, trial.k
        check, condition = check_by_defect(c, outcome.x, outcome.y, outcome.p, k)
        state = outcome.workspace
        states = state.states if isinstance(state, _State) else None
        x, y = outcome.x, outcome.y
        for _ in range(2):
            if check <= trial.tol or states is None or 2 * x.size - 1 > max(trial.max_nodes, outcome.x.size):
                break
            fine = np.empty(2 * x.size - 1)
            fine[::2], fine[1::2] = x, 0.5 * (x[1:] + x[:-1])
            fine_y = states(fine)
            fine_check, fine_condition = check_by_defect(c, fine, fine_y, outcome.p, k)
            if not fine_check < check:
                break
            x, y, check, condition = fine, fine_y, fine_check, fine_condition
        if x is not outcome.x:
            outcome.x, outcome.y = x, y
        if check > trial.tol and math.isfinite(check):
            floor = _check_floor(c, x, y, outcome.p, k, check)
            if check <= floor:
                check = min(check, outcome.error_estimate if outcome.error_estimate is not None else check)
        return check, condition

    def _solve(self, trial: Trial) -> Outcome:
        c, k = trial.compiled, trial.k
        x, y, p = np.asarray(trial.x, float), np.asarray(trial.y, float), np.asarray(trial.p, float)
        if not (np.all(np.isfinite(y)) and np.all(np.isfinite(p))):
            return Outcome(Status.NON_FINITE, "the guess holds NaN or inf", x, y, p)
        facts = survey(c, x, y, p, k)
        if not (math.isfinite(facts.growth) and np.all(np.isfinite(facts.rates))):
            return Outcome(Status.NON_FINITE, "the Jacobian is not finite along the guess (a term like sqrt(y) "
                           "where y = 0?), so no integration can start from it; use collocation, or a guess "
                           "inside the domain of the equations", x, y, p)
        stiff = facts.stiffness > _STIFF
        nodes = self._nodes(x, facts)
        spline = hermite(c, x, y, p, k)
        s = spline(nodes[:-1])
        if not np.all(np.isfinite(s)):
            s = np.array([np.interp(nodes[:-1], x, row) for row in y])
        rtol = max(_IVP_FLOOR, trial.tol * (_ONE_SEGMENT_SHARE if nodes.size == 2 else _IVP_SHARE))
        return self._newton(trial, nodes, s, p, rtol, stiff)

    def _refine(self, trial: Trial, outcome: Outcome) -> Outcome:
        """The same solve with a tighter integrator, started from ``outcome`` (100 times tighter;
        one segment: 10 times, from the solve's own matrix, on the solve's halved mesh)."""
        refined = dataclasses.replace(trial, tol=max(trial.tol * 1e-2, _IVP_FLOOR / _IVP_SHARE),
                                      x=outcome.x, y=outcome.y, p=outcome.p)
        state = outcome.workspace
        if not isinstance(state, _State):
            return self._solve(refined)
        s = outcome.y[:, np.searchsorted(outcome.x, state.nodes[:-1])]
        if state.secant is not None:
            # one segment: the re-solve starts from the solve's own matrix and gives its states on
            # the solve's halved mesh (what the estimate compares), with no output mesh of its own;
            # a tenth of the solve's own integration error is all the estimate needs
            rtol = max(_IVP_FLOOR, trial.tol * _ONE_SEGMENT_SHARE * 0.1)
            return variational.reference(self, refined, state.nodes, s, outcome.p, rtol, state.secant, outcome.x,
                                         trial.tol)
        rtol = max(_IVP_FLOOR, refined.tol * _IVP_SHARE)
        return self._newton(refined, state.nodes, s, outcome.p, rtol, state.stiff)

    # -- segments -----------------------------------------------------------------------
    def _nodes(self, x: np.ndarray, facts) -> np.ndarray:  # noqa: ANN001
        a, b = float(x[0]), float(x[-1])
        if self.fixed_segments is not None:
            return np.linspace(a, b, self.fixed_segments + 1)
        log_growth = math.log(max(facts.growth, 1.0))
        count = int(min(_MAX_SEGMENTS, max(4, math.ceil(log_growth / _SEGMENT_LOG_GROWTH))))
        # equidistribute growth plus a uniform share, so quiet stretches still get nodes
        weight = np.asarray(facts.rates) + (log_growth + 1.0) / (b - a)
        cumulative = np.concatenate([[0.0], np.cumsum(0.5 * (weight[1:] + weight[:-1]) * np.diff(x))])
        targets = np.linspace(0.0, cumulative[-1], count + 1)
        nodes = np.interp(targets, cumulative, x)
        nodes[0], nodes[-1] = a, b
        return np.unique(nodes)

    # -- integration --------------------------------------------------------------------
    def _flow(self, trial: Trial, nodes: np.ndarray, s: np.ndarray, p: np.ndarray, rtol: float,
              stiff: bool, dense: bool = False, sensitivities: bool = True, max_step: float = np.inf) -> _Flow:
        c, k = trial.compiled, trial.k
        n, n_p, segments = c.n, c.n_parameters, nodes.size - 1
        if segments == 1 and not stiff:  # one point per call: the fused variational system
            return variational.one_segment_flow(trial, nodes, s, p, rtol, dense, sensitivities, max_step)
        t0, h = nodes[:-1], np.diff(nodes)
        size = n + (n * n + n * n_p if sensitivities else 0)
        start = np.zeros((size, segments))
        start[:n] = s
        if sensitivities:  # per state row i: Phi[i, :] then Psi[i, :] (Phi(0) = I, Psi(0) = 0)
            start[n:].reshape(n, n + n_p, segments)[np.arange(n), np.arange(n)] = 1.0

        calls = [0]
        width = n + n_p  # the sensitivities Phi and Psi side by side: one product per call
        with_p = sensitivities and n_p > 0

        def rhs(tau, z):
            calls[0] += 1
            if calls[0] > _MAX_CALLS:
                raise _BlowUp(float(t0[0] + tau * h[0]), -1, f"the integration needed more than {_MAX_CALLS} "
                              "evaluations (the step size is collapsing or the problem is too stiff)")
            z = z.reshape(size, segments)
            xs = t0 + tau * h
            ys = z[:n]
            f = c.rhs(xs, ys, p, k)
            # one cheap test per call (a sum is finite only when every term is): a NaN/inf
            # derivative or a state beyond _BLOWUP
            if not (math.isfinite(float(f.sum())) and float(np.abs(ys).max()) < _BLOWUP):
                if not np.all(np.isfinite(f)):
                    bad = np.argwhere(~np.isfinite(f))[0]
                    raise _BlowUp(float(xs[bad[1]]), int(bad[0]), "the right-hand side became NaN or inf", int(bad[1]))
                if np.abs(ys).max() >= _BLOWUP:
                    bad = np.unravel_index(np.argmax(np.abs(ys)), ys.shape)
                    raise _BlowUp(float(xs[bad[1]]), int(bad[0]), "the trajectory blew up", int(bad[1]))
            if not sensitivities:
                return (f * h).ravel()
            out = np.empty((size, segments))
            out[:n] = f
            sens = z[n:].reshape(n, width, segments)  # Phi (n, n) then Psi (n, n_p), per segment
            d = np.einsum("ijm,jkm->ikm", c.jac(xs, ys, p, k), sens)
            if with_p:
                d[:, n:] += c.pjac(xs, ys, p, k)
            out[n:] = d.reshape(n * width, segments)
            out *= h
            return out.ravel()

        from scipy.integrate import solve_ivp  # imported here: a collocation-only run never needs it

        options = dict(rtol=rtol, atol=rtol, dense_output=dense, max_step=max_step)
        if stiff:
            block = sparse.kron(np.ones((size, size)), sparse.eye(segments))
            options.update(method="Radau", jac_sparsity=block)
        else:
            options.update(method="DOP853")
        result = variational.integrate(solve_ivp, rhs, (0.0, 1.0), start.ravel(), options,
                                       pieces(trial.features, t0, h))
        if result.status != 0:
            tau = float(result.t[-1]) if result.t.size else 0.0
            where = t0 + tau * h
            raise _BlowUp(float(where[0] if segments == 1 else where.min()), -1,
                          f"the integrator's step size collapsed ({result.message.rstrip('.')})")
        end = result.y[:, -1].reshape(size, segments)
        sens = end[n:].reshape(n, n + n_p, segments) if sensitivities else None
        phi = sens[:, :n] if sensitivities else np.zeros((n, n, segments))
        psi = sens[:, n:] if sensitivities else np.zeros((n, n_p, segments))
        growth = np.abs(phi).reshape(n * n, segments).max(axis=0) if sensitivities else np.ones(segments)
        return _Flow(end[:n], phi, psi, result.sol if dense else None, growth)

    # -- Newton -------------------------------------------------------------------------
    def _residual(self, trial: Trial, s: np.ndarray, p: np.ndarray, flow: _Flow) -> np.ndarray:
        c = trial.compiled
        continuity = (flow.ends[:, :-1] - s[:, 1:]).T.ravel()
        boundary = c.bc(s[:, 0], flow.ends[:, -1], p, trial.k)
        return np.concatenate([continuity, boundary])

    def _matrix(self, trial: Trial, s: np.ndarray, p: np.ndarray, flow: _Flow):  # noqa: ANN202
        """The blocks of the bordered block-bidiagonal shooting matrix (as ``factor_blocks``
        takes them): row block ``j`` is the continuity of segment ``j`` (``Phi_j`` on its
        start, ``-I`` on the next start, ``Psi_j`` on the parameters), then the conditions
        through the last segment's sensitivities."""
        c = trial.compiled
        n, n_p, segments = c.n, c.n_parameters, s.shape[1]
        a, b, dp = c.bc_jac(s[:, 0], flow.ends[:, -1], p, trial.k)
        left = np.ascontiguousarray(np.moveaxis(flow.phi[:, :, :-1], -1, 0))
        right = np.broadcast_to(-np.eye(n), (segments - 1, n, n))
        params = np.ascontiguousarray(np.moveaxis(flow.psi[:, :, :-1], -1, 0)) if n_p else None
        last_p = b @ flow.psi[:, :, -1] + np.reshape(dp, (b.shape[0], -1)) if n_p else None
        return left, right, params, a, b @ flow.phi[:, :, -1], last_p

    def _newton(self, trial: Trial, nodes: np.ndarray, s: np.ndarray, p: np.ndarray, rtol: float,
                stiff: bool) -> Outcome:
        n = trial.compiled.n
        if nodes.size == 2 and not stiff and n + trial.compiled.n_parameters <= variational.MAX_BROYDEN:
            return variational.secant_newton(self, trial, nodes, s, p, rtol)
        x_guess, y_guess = np.asarray(trial.x, float), np.asarray(trial.y, float)

        def failure(status: Status, message: str, iterations: int) -> Outcome:
            return Outcome(status, message, x_guess, y_guess, np.asarray(trial.p, float), iterations=iterations)

        splits = 0
        while True:
            try:
                flow = self._flow(trial, nodes, s, p, rtol, stiff)
                break
            except _BlowUp as err:
                # Multiple shooting: shorten the segments where the guess blows up, and retry.
                if self.fixed_segments is not None or nodes.size - 1 >= _MAX_SEGMENTS or splits >= 12:
                    return failure(Status.INTEGRATION_FAILED, self._blowup_message(trial, err, "from the guess"), 0)
                wide = np.arange(nodes.size - 1) if err.segment < 0 else np.array([err.segment])
                nodes, s = self._split_from_guess(trial, nodes, s, wide)
                splits += 1
        iterations = 0
        last_size = math.inf
        while iterations < _MAX_NEWTON:
            if trial.out_of_time():
                return failure(Status.NOT_CONVERGED, f"stopped after {iterations} Newton iterations: the time budget of "
                               "this attempt is spent; " + Status.NOT_CONVERGED.hint, iterations)
            # Split segments whose sensitivities grow too much (multiple shooting only).
            if self.fixed_segments is None and nodes.size - 1 < _MAX_SEGMENTS and splits < 8:
                wide = np.flatnonzero(flow.max_growth > _SPLIT_GROWTH)
                if wide.size:
                    nodes, s = self._split(trial, nodes, s, p, rtol, stiff, wide)
                    splits += 1
                    try:
                        flow = self._flow(trial, nodes, s, p, rtol, stiff)
                    except _BlowUp as err:
                        return failure(Status.INTEGRATION_FAILED, self._blowup_message(trial, err, "after splitting"), iterations)
                    continue
            residual = self._residual(trial, s, p, flow)
            norm = float(np.max(np.abs(residual))) if residual.size else 0.0
            matrix = self._matrix(trial, s, p, flow)
            if not all(np.all(np.isfinite(block)) for block in matrix if block is not None) or not np.isfinite(norm):
                return failure(Status.NON_FINITE, "the shooting residual or its Jacobian is NaN or inf", iterations)
            try:
                step = factor_blocks(*matrix).solve(-residual)
            except SingularMatrix:
                return failure(Status.SINGULAR, "the shooting Newton matrix is singular; " + Status.SINGULAR.hint, iterations)
            if not np.all(np.isfinite(step)):
                return failure(Status.SINGULAR, "the shooting Newton matrix is numerically singular; " + Status.SINGULAR.hint, iterations)
            iterations += 1
            ds, dp = step[: n * s.shape[1]].reshape(s.shape[1], n).T, step[n * s.shape[1]:]
            size = max(
                float(np.max(np.abs(ds) / (1.0 + np.abs(s)))),
                float(np.max(np.abs(dp) / (1.0 + np.abs(p)))) if dp.size else 0.0,
            )
            lam, accepted = 1.0, False
            last_error: _BlowUp | None = None
            while lam >= _MIN_STEP:
                s_new, p_new = s + lam * ds, p + lam * dp
                try:
                    flow_new = self._flow(trial, nodes, s_new, p_new, rtol, stiff)
                except _BlowUp as err:
                    last_error = err
                    lam *= 0.5
                    continue
                r_new = self._residual(trial, s_new, p_new, flow_new)
                norm_new = float(np.max(np.abs(r_new))) if r_new.size else 0.0
                if np.isfinite(norm_new) and (norm_new <= (1 - 0.25 * lam) * norm or size < trial.tol * 1e-2 or norm_new < 1e-14):
                    accepted = True
                    break
                lam *= 0.5
            if not accepted:
                scale = np.concatenate([(1.0 + np.abs(s[:, 1:])).T.ravel(), np.ones(residual.size - n * (s.shape[1] - 1))])
                if float(np.max(np.abs(residual) / scale)) <= 10 * rtol:
                    # already at the integrator's noise level: converged
                    return self._finish(trial, nodes, s, p, rtol, stiff, iterations, matrix)
                if last_error is not None:
                    return failure(Status.INTEGRATION_FAILED,
                                   self._blowup_message(trial, last_error, "at every trial step of Newton's method"),
                                   iterations)
                return failure(Status.NOT_CONVERGED,
                               f"the line search could not reduce the boundary residual ({norm:.3g}) after "
                               f"{iterations} Newton iterations; " + Status.NOT_CONVERGED.hint, iterations)
            s, p, flow = s_new, p_new, flow_new
            # converged: this step tiny, or (Deuflhard's estimate) the next one, contraction times
            # this one, tiny while contracting fast; _finish checks the residual itself
            rate, previous_size = size / last_size, last_size
            last_size = size
            if lam == 1.0 and (size <= trial.tol * 1e-2 or (math.isfinite(previous_size) and 0 < rate < 0.1 and rate * size <= trial.tol * 1e-2)):
                return self._finish(trial, nodes, s, p, rtol, stiff, iterations, matrix)
        return failure(Status.NOT_CONVERGED,
                       f"Newton's method did not converge in {_MAX_NEWTON} iterations; " + Status.NOT_CONVERGED.hint,
                       iterations)

    def _split_from_guess(self, trial, nodes, s, wide):  # noqa: ANN001, ANN202
        """Halve segments ``wide``, taking the new node states from the guess."""
        mids = 0.5 * (nodes[wide] + nodes[wide + 1])
        spline = hermite(trial.compiled, trial.x, trial.y, trial.p, trial.k)
        states = spline(mids)
        if not np.all(np.isfinite(states)):  # slopes of a guess outside the equations' domain
            states = np.array([np.interp(mids, trial.x, row) for row in trial.y])
        starts = np.concatenate([nodes[:-1], mids])
        keep = np.argsort(starts)
        return np.sort(np.concatenate([nodes, mids])), np.concatenate([s, states], axis=1)[:, keep]

    def _split(self, trial, nodes, s, p, rtol, stiff, wide):  # noqa: ANN001, ANN202
        mids = 0.5 * (nodes[wide] + nodes[wide + 1])
        try:
            flow = self._flow(trial, nodes, s, p, rtol, stiff, dense=True, sensitivities=False)
            states = flow.dense(0.5).reshape(trial.compiled.n, nodes.size - 1)[:, wide]
        except _BlowUp:
            states = np.array([np.interp(mids, nodes[:-1], row) for row in s])
        new_nodes = np.concatenate([nodes, mids])
        order = np.argsort(new_nodes)
        new_s = np.concatenate([s, states], axis=1)
        # node states belong to segment starts: the end node b carries no state
        starts = np.concatenate([nodes[:-1], mids])
        keep = np.argsort(starts)
        return new_nodes[order], new_s[:, keep]

    def _finish(self, trial, nodes, s, p, rtol, stiff, iterations, matrix, flow=None) -> Outcome:  # noqa: ANN001
        """Build the output mesh from the dense output, fine enough for the C1 interpolant
        (``flow``: the last trial's, when it was integrated with its dense output)."""
        n = trial.compiled.n
        # A tiny Newton step is not enough: on an ill-conditioned shooting matrix the step
        # stalls while the conditions are still missed. Check the residual itself.
        try:  # one pass: the dense output changes none of the integrator's steps
            if flow is None or flow.dense is None:
                flow = self._flow(trial, nodes, s, p, rtol, stiff, dense=True, sensitivities=False)
        except _BlowUp as err:  # pragma: no cover - the same integration just succeeded
            return Outcome(Status.INTEGRATION_FAILED, str(err), trial.x, trial.y, p, iterations=iterations)
        residual = self._residual(trial, s, p, flow)
        # continuity rows relative to the node states, condition rows to the end states
        size = 1.0 + max(float(np.max(np.abs(s[:, 0]))), float(np.max(np.abs(flow.ends[:, -1]))))
        scale = np.concatenate([(1.0 + np.abs(s[:, 1:])).T.ravel(), np.full(residual.size - n * (s.shape[1] - 1), size)])
        miss = float(np.max(np.abs(residual) / scale)) if residual.size else 0.0
        if not miss <= 10 * trial.tol:  # integration noise is ~ rtol = tol/10 times the growth
            return Outcome(
                Status.NOT_CONVERGED,
                f"Newton's steps stalled with the conditions missed by {miss:.2g}: the shooting matrix is too "
                "ill-conditioned (sensitivities grow too much across a segment); use method = "
                "\"multiple_shooting\" or \"collocation\"",
                trial.x, trial.y, trial.p, iterations=iterations,
            )
        segments = nodes.size - 1
        h = np.diff(nodes)
        if rtol < _DENSE_CHECK:
            flow = self._dense(trial, nodes, s, p, rtol, stiff, flow)

        # Each segment's end misses the next node state by the continuity residual; spread
        # that miss linearly over the segment so the output is continuous at the nodes (a
        # jump there, seen across a tiny interval, would spoil the interpolant's slope).
        gap = np.zeros((n, segments))
        gap[:, :-1] = s[:, 1:] - flow.ends[:, :-1]

        def states(points: np.ndarray) -> np.ndarray:
            j = np.clip(np.searchsorted(nodes, points, side="right") - 1, 0, segments - 1)
            tau = np.clip((points - nodes[j]) / h[j], 0.0, 1.0)
            values = variational.dense_values(flow.dense, tau).reshape(n, segments, tau.size)
            return values[:, j, np.arange(tau.size)] + tau * gap[:, j]

        taus = np.unique(np.concatenate([np.linspace(0, 1, 5), flow.dense.ts]))
        # a last step of round-off size (the integrator landing on tau = 1) is no interval of its
        # own: a node that close to the next one only feeds round-off into checks of slopes
        taus = taus[np.concatenate([[True], np.diff(taus)[1:] > 1e-9, [True]])]
        # segment points, clipped (t_j + 1 * h_j may round past the end), ends exact
        x = np.clip((nodes[:-1, None] + taus[None, :] * h[:, None]).ravel(), nodes[0], nodes[-1])
        x = np.unique(np.concatenate([[nodes[0]], x, [nodes[-1]]]))
        keep = np.concatenate([np.diff(x) > 1e-14 * max(1.0, float(np.abs(x).max())), [True]])
        keep[0] = True
        x = x[keep]
        x, y = _output_mesh(trial, x, states, p, rtol)
        outcome = Outcome(Status.SOLVED, f"converged in {iterations} Newton iteration{'s' if iterations != 1 else ''} with {segments} "
                          f"segment{'s' if segments > 1 else ''} ({'Radau' if stiff else 'DOP853'})",
                          x, y, p, iterations=iterations)
        outcome.workspace = _State(nodes, stiff, states)
        return outcome

    def _dense(self, trial: Trial, nodes: np.ndarray, s: np.ndarray, p: np.ndarray, rtol: float, stiff: bool,
               flow: _Flow) -> _Flow:
        """A dense output good to the tolerance between the integrator's steps, not only at them.

        The integrator controls its error at the end of each step; its dense output between
        them is of a lower order, and on long smooth steps misses by far more (seen: 1.5e-11
        in the middle of the steps of a run whose step values were good to 1e-13). The pass is
        repeated with the largest step halved until two passes agree to a tenth of the
        tolerance in the middle of the coarser one's steps (at most three times); the finer
        is kept. Used near the integrator's tolerance floor only: above it, the error estimate's
        re-solve with a 100 times tighter integrator sees this error, and the tolerance is
        tightened until it meets the tolerance.
        """
        n, segments = trial.compiled.n, nodes.size - 1
        for _ in range(3):
            ts = flow.dense.ts
            probe = 0.5 * (ts[1:] + ts[:-1])
            try:
                finer = self._flow(trial, nodes, s, p, rtol, stiff, dense=True, sensitivities=False,
                                   max_step=0.5 * float(np.max(np.diff(ts))))
            except _BlowUp:
                return flow
            coarse_values = flow.dense(probe).reshape(n, segments, probe.size)
            fine_values = finer.dense(probe).reshape(n, segments, probe.size)
            with np.errstate(all="ignore"):
                change = float(np.max(np.abs(coarse_values - fine_values) / (1.0 + np.abs(fine_values))))
            flow = finer
            if change <= 0.1 * trial.tol:
                break
        return flow

    def _blowup_message(self, trial: Trial, err: _BlowUp, when: str) -> str:
        names = trial.compiled.layout.row_names
        which = f" in {names[err.state]}" if 0 <= err.state < len(names) else ""
        hint = ("; try method = \"multiple_shooting\" or \"collocation\""
                if self.fixed_segments == 1 else "; try method = \"collocation\" or a better guess")
        return f"integration failed {when}: {err.what}{which} near {trial.place(err.x)}{hint}"


def _output_mesh(trial: Trial, x: np.ndarray, states, p: np.ndarray, rtol: float):  # noqa: ANN001, ANN202
    """The output mesh of a shooting solution: ``x`` refined until the C1 cubic interpolant (what
    a Solution evaluates) follows the integrator's dense output ``states`` between the nodes.

    Refined where the cubic misses the dense output by more than a tenth of the tolerance, or its
    derivative misses the equations by more than about ``tol**0.75`` (the accuracy a cubic's
    derivative has when its values are good to tol) and more than the dense output's own noise
    (``rtol`` of the values over the interval: the pieces of the dense output meet only to the
    integrator's accuracy, and a slope read across a tiny interval at such a seam is noise).
    The zero crossings of the states become nodes: there the relative measure
    ``|dy| / (1 + |y|)`` is at its harshest. Returns ``(x, y)``.
    """
    c, k = trial.compiled, trial.k
    y = states(x)
    for _ in range(8):
        roots = crossings(states, x, y)
        if roots.size:  # not on top of a node already
            j = np.clip(np.searchsorted(x, roots), 1, x.size - 1)
            roots = roots[np.minimum(roots - x[j - 1], x[j] - roots) > 1e-6 * (x[j] - x[j - 1])]
        if roots.size:
            x = np.sort(np.concatenate([x, roots]))
            y = states(x)
        h = np.diff(x)
        mid = x[:-1] + 0.5 * h
        exact = states(mid)
        spline = hermite(c, x, y, p, k)
        miss = np.max(np.abs(spline(mid) - exact) / (1.0 + np.abs(exact)), axis=0)
        with np.errstate(all="ignore"):
            f = c.slopes(mid, exact, p, k)
            scale = c.row_scale(p, k) + np.abs(f)
            slope_miss = np.max(np.abs(spline.derivative()(mid) - f) / scale, axis=0)
            noise = np.max(10.0 * rtol * (1.0 + np.abs(exact)) / h / scale, axis=0)
        slow = (slope_miss > trial.tol**0.75) & (slope_miss > noise)
        bad = (miss > trial.tol * 0.1) | slow
        if not bad.any() or x.size > trial.max_nodes:
            break
        # split each interval by the factor its miss predicts (a cubic's error goes as h**4, its slope's as h**3)
        x = variational.subdivide(x, bad, np.maximum((miss / (trial.tol * 0.1)) ** 0.25,
                                                      np.where(slow, slope_miss / trial.tol**0.75, 0.0) ** (1 / 3)))
        y = states(x)
    return x, y


def _check_floor(compiled, x: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray, check: float) -> float:  # noqa: ANN001
    """The round-off floor of the deferred-correction check at ``(x, y)``: how far the check
    moves when the values are perturbed by a few units of round-off (a fixed pattern, so the
    figure is the same from run to run), times two. A check at or below it measures
    round-off, not the solution."""
    pattern = np.cos(np.arange(y.size, dtype=float) * 0.7548776662).reshape(y.shape)  # in [-1, 1], no period
    noisy = y + 4.0 * _EPS * np.abs(y) * pattern
    moved, _ = check_by_defect(compiled, x, noisy, p, k)
    return 2.0 * abs(moved - check) if math.isfinite(moved) else 0.0

