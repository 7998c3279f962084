"""Settling an outcome: the one place a method's outcome becomes a :class:`Solution`.

The last guards (finite values; the estimate within the tolerance, or round-off times the
stability constant bounding it: ``precision_limit``; an ill-conditioned problem said so), each
problem class's verdict (:meth:`bvpkit.reduce.transform.Transform.check`: the eigenvalue's
mode), its own cause of a failure (:meth:`~bvpkit.reduce.transform.Transform.diagnose`:
where the algebraic equations lost their root) and words
(:meth:`~bvpkit.reduce.transform.Transform.describe`: where infinity was placed), a warning
where the problem is nearly singular, the residuals and the diagnostics. ``solve``,
``solve_at`` (continuation's natural steps), arclength points and fold curves all settle
here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..methods.base import Outcome
from ..methods.diagnostics import Diagnostics, condition_estimate, hermite, residuals
from ..methods.features import unresolved, words
from ..reduce.mapping import Interpolant, Start, physical, positions
from ..reduce.prepared import Prepared
from ..status import Status
from .homotopy import earlier_end
from .solution import Solution

#: Unit round-off of double precision: the stability constant times it is the smallest error
#: any method can promise.
_ROUNDING = float(np.finfo(float).eps)
#: A stability constant (over the solution's size) this many times ``1 + |eigenvalue| x length``
#: of the Jacobian is more than the problem's fast modes explain: the layers of the test set
#: (benchmarks/testset.py) stay below 50 times, y'' + pi^2 y = 0 at its eigenvalue is 1e7 times.
_NEAR_SINGULAR = 1e3
#: Growth of the stability constant on halving the mesh above which it has no limit: a
#: singular problem's grows 4 times (the trapezoidal rule's second order), a well-posed one's
#: converges (y'' + pi^2 y = 0 at its eigenvalue: 4.0; the layers of the test set: 1.0 to 1.3).
_DIVERGING = 3.0
_SAMPLES = 21  # points where the Jacobian's eigenvalues are read for that comparison
#: Round-off times the stability constant up to this is an accuracy worth reporting as reached
#: (precision_limit); above, the problem is too ill-conditioned for any answer (error_too_large).
_MEANINGFUL = 1e-3


@dataclass
class Run:
    """A solve's outcome before it is settled: what the methods returned, at which constants,
    what was tried, and what a class's loop adds (:meth:`Transform.around`).

    Attributes
    ----------
    outcome : Outcome
    k : ndarray
        The constants it was solved at (a truncation length where it was placed).
    attempts : list of Attempt
    selection : str
        Why the first method was chosen.
    tol : float or None
        The tolerance the answer must meet (None: no check against one).
    independent : str
        The name of the independent variable (for words).
    extra_error : float or None
        An error beyond the method's own estimate (the change seen when infinity moved out),
        added to it.
    previous : Start or None
        A neighbouring solve (a shorter truncation) whose outputs bound the outputs' errors.
    notes : dict
        Fields of :class:`~bvpkit.methods.diagnostics.Diagnostics` a class fills in
        (``truncation_length``, ``truncation_error``).
    """

    outcome: Outcome
    k: np.ndarray
    attempts: list
    selection: str
    tol: float | None
    independent: str = "x"
    extra_error: float | None = None
    previous: Start | None = None
    notes: dict[str, Any] = field(default_factory=dict)


def settle(prepared: Prepared, run: Run, seconds: float) -> Solution:
    """Turn a run's outcome into a :class:`Solution`, settling its status: the last guards
    (finite values, the estimate within the tolerance), each class's verdict (the eigenvalue's
    mode), the residuals and stability constant, and the words of the message."""
    compiled = prepared.compiled
    layout = compiled.layout
    outcome, k, attempts, selection, tol = run.outcome, run.k, run.attempts, run.selection, run.tol
    change = run.extra_error
    residual, bc_residual = residuals(compiled, outcome.x, outcome.y, outcome.p, k)
    discretisation = outcome.error_estimate
    estimate = math.nan
    if discretisation is not None:
        estimate = discretisation + (change if change is not None and math.isfinite(change) else 0.0)
    status, message = outcome.status, outcome.message
    with np.errstate(all="ignore"):
        a, b = positions(np.asarray(compiled.maps(outcome.p, k), float))[[0, -1]]
    for transform in prepared.transforms:
        words = transform.describe(prepared, run, (float(a), float(b)))
        if words and status is Status.SOLVED:
            message += f"; {words}"
    verified = outcome.error_estimate is not None  # verify=False skips the condition estimate too
    condition = None
    if (verified and status in (Status.SOLVED, Status.ERROR_TOO_LARGE, Status.PRECISION_LIMIT)
            and np.isfinite(outcome.y).all()):
        condition = outcome.condition if outcome.condition is not None else condition_estimate(
            compiled, outcome.x, outcome.y, outcome.p, k)
    if condition is not None and math.isfinite(estimate):
        # Round-off alone, amplified by the problem's stability constant, bounds what any method
        # in double precision can promise: the estimate never claims better than that.
        estimate = max(estimate, condition * _ROUNDING)
    # The last guards: success never comes with non-finite values or an estimate above tol.
    if status is Status.SOLVED and not (np.isfinite(outcome.y).all() and np.isfinite(outcome.p).all()):
        status, message = Status.NON_FINITE, "the solution holds NaN or inf; " + Status.NON_FINITE.hint
    if status is Status.SOLVED:
        # ... nor with a narrow feature of the equations that the answer's mesh steps over
        status, message = _features_resolved(prepared, outcome, k, status, message)
    attainable = condition * _ROUNDING if condition is not None and math.isfinite(condition) else math.inf
    missed = (status is Status.SOLVED and tol is not None and math.isfinite(estimate)
              and estimate > tol * (1 + 1e-9))
    if missed and attainable <= _MEANINGFUL and estimate <= attainable * (1 + 1e-9):
        # the method met the tolerance; round-off times the stability constant alone does not
        status = Status.PRECISION_LIMIT
        message = (
            "tolerance below what double precision allows here: the method converged and its own estimate "
            "meets the tolerance, but round-off alone, amplified by the stability constant "
            f"{condition:.2g}, can change the solution by about {attainable:.2g}, the accuracy reached, "
            f"against the tolerance {tol:.2g}; " + Status.PRECISION_LIMIT.hint
        )
    if (status is Status.PRECISION_LIMIT and discretisation is not None and math.isfinite(attainable)
            and attainable > discretisation):
        message += (f"; round-off amplified by the stability constant {condition:.2g} bounds the accuracy at "
                    f"about {attainable:.2g}, the error estimate given")
    if status is Status.SOLVED and tol is not None and math.isfinite(estimate) and estimate > tol * (1 + 1e-9):
        status = Status.ERROR_TOO_LARGE
        message = f"converged, but the estimated error {estimate:.2g} is above the tolerance {tol:.2g}"
    if (status is Status.ERROR_TOO_LARGE and tol is not None and condition is not None
            and condition * _ROUNDING > tol and "ill-conditioned" not in message):
        message += (
            f"; the problem is ill-conditioned (stability constant {condition:.2g}), so round-off alone can "
            f"change the solution by {condition * _ROUNDING:.2g}: no method in double precision can do better. "
            "Look for a formulation whose answer depends less on small changes (other conditions, a "
            "shorter domain, other variables)"
        )
    for transform in prepared.transforms:
        verdict = transform.check(prepared, outcome, k) if status is Status.SOLVED else None
        if verdict is not None:
            # the class's words: added to a success, or the reason it is not one
            status, message = verdict if verdict[0] is not Status.SOLVED else (status, f"{message}; {verdict[1]}")
    if not status.success:
        for transform in prepared.transforms:
            cause = transform.diagnose(prepared, outcome, k)
            if cause:  # the class's own cause first, then what the method saw
                message = f"{cause} ({message})"
                break
    if status is Status.SOLVED and tol is not None and condition is not None:
        warning = _nearly_singular(compiled, outcome, k, condition, tol)
        if warning:
            status, message = Status.NEARLY_SINGULAR, f"{message}; but {warning}"
    elif status is Status.PRECISION_LIMIT and tol is not None and condition is not None:
        # round-off times a huge stability constant: say when the cause is a singular problem
        warning = _nearly_singular(compiled, outcome, k, condition, tol)
        if warning:
            message = f"{message}; {warning}"
    if status.success and layout.parameters:
        note = earlier_end(prepared, outcome.x, outcome.y, outcome.p, k)
        if note:
            message = f"{message}; note: {note}"
    diagnostics = Diagnostics(
        method=outcome.method or (attempts[-1].method if attempts else ""),
        iterations=outcome.iterations,
        mesh_nodes=layout.mesh_nodes(outcome.x.size),
        max_residual=residual,
        bc_residual=bc_residual,
        error_estimate=estimate,
        discretisation_error=discretisation,
        condition=condition,
        seconds=seconds,
        attempts=attempts,
        selection=selection,
        tol=tol,
        **run.notes,  # what a class noted for the diagnostics (where infinity was placed)
    )
    reference = None
    if outcome.reference is not None:
        ref = outcome.reference
        reference = Interpolant(compiled, ref.x, ref.y, ref.p, k)
    previous = None
    if run.previous is not None:
        before = run.previous
        previous = Interpolant(compiled, before.t, before.y, before.p, before.k)
    return Solution(prepared, k, status, message, diagnostics.method, outcome.x, outcome.y, outcome.p,
                    diagnostics, outcome.parameter_errors, reference, previous)


def _nearly_singular(compiled, outcome: Outcome, k: np.ndarray, condition: float,  # noqa: ANN001
                     tol: float) -> str:
    """Why a converged solution that meets the tolerance is still a warning ('' when it is not).

    The stability constant ``K`` bounds how far a change of the equations moves the solution;
    against the solution's size ``Y = 1 + max |y|`` (the tolerance is relative) it reads
    ``K / Y``. Two conditions together: ``K tol / Y > 1`` (a change of the equations within
    the tolerance asked could move the solution by more than its own size, so the tolerance
    no longer pins it down), and ``K / Y`` far above what the problem's own fast modes explain
    (``_NEAR_SINGULAR`` times ``1 + |eigenvalue| x length`` of the Jacobian along the solution:
    a thin layer of width ``eps`` has ``K ~ 1/eps`` and is well posed). Both hold near a
    singular linearised problem: a homogeneous problem at an eigenvalue, a resonance, a fold
    or a branch point.
    """
    size = 1.0 + float(np.max(np.abs(outcome.y[compiled.layout.user_rows]), initial=0.0))
    relative = condition / size
    if not (math.isfinite(relative) and relative > _NEAR_SINGULAR):
        return ""
    if relative <= _NEAR_SINGULAR * (1.0 + _fastest(compiled, outcome, k)):
        return ""
    if relative * tol > 1.0:
        return (f"the problem is nearly singular here (stability constant {condition:.2g}, against a tolerance "
                f"of {tol:.2g}): {_likely_cause(compiled, outcome, k)}")
    growth = _growth_on_halving(compiled, outcome, k)
    if not growth >= _DIVERGING:
        return ""
    return (f"the problem is singular here (its stability constant, {condition:.2g} on this mesh, grows "
            f"{growth:.2g} times when the mesh is halved: it has no bound, whatever the tolerance): "
            f"{_likely_cause(compiled, outcome, k)}")


def _growth_on_halving(compiled, outcome: Outcome, k: np.ndarray) -> float:  # noqa: ANN001
    """How much the stability constant (``condition_estimate``, trapezoidal rule) grows when the
    solution's mesh is halved: about 1 for a well-posed problem, where it converges; about 4
    for a singular linearised problem, where the discrete eigenvalue closing on zero (at the
    rule's second order) sets the figure and the constant has no limit. NaN when it cannot
    be estimated."""
    x = outcome.x
    fine = np.empty(2 * x.size - 1)
    fine[::2], fine[1::2] = x, 0.5 * (x[1:] + x[:-1])
    with np.errstate(all="ignore"):
        y = hermite(compiled, x, outcome.y, outcome.p, k)(fine)
        if not np.isfinite(y).all():
            return math.nan
        coarse = condition_estimate(compiled, x, outcome.y, outcome.p, k)
        halved = condition_estimate(compiled, fine, y, outcome.p, k)
    if coarse is None or halved is None or not (coarse > 0 and math.isfinite(coarse)):
        return math.nan
    return halved / coarse


def _features_resolved(prepared: Prepared, outcome: Outcome, k: np.ndarray, status: Status,
                       message: str) -> tuple[Status, str]:
    """A success whose mesh does not hold a narrow feature of the equations
    (:func:`bvpkit.methods.features.unresolved`) is no success: the method never saw the feature,
    and its error estimate cannot either."""
    missed = unresolved(outcome.x, prepared.features(outcome.p, k))
    if missed is None:
        return status, message
    compiled = prepared.compiled
    with np.errstate(all="ignore"):
        scale = float(np.abs(np.asarray(compiled.maps(outcome.p, k), float)[0, 1]))
    what = words(missed, place(compiled, outcome.p, k), scale)
    if not missed.representable:
        why = (f"{what}: narrower than double precision can resolve there, so no mesh holds it; write the term "
               "as a step (min, max) or widen it")
    else:
        why = (f"{what}, which the final mesh of {outcome.x.size} nodes does not resolve (the method stepped over "
               "it, and its error estimate cannot see it); raise max_nodes or give a finer first guess there")
    return Status.MESH_LIMIT, f"{message}, but the equations hold {why}"


def _fastest(compiled, outcome: Outcome, k: np.ndarray) -> float:  # noqa: ANN001
    """``max |eigenvalue| x length`` of the Jacobian along the solution (oscillating modes
    count: their eigenvalues are imaginary), sampled at a few points."""
    x = outcome.x
    at = np.unique(np.linspace(0, x.size - 1, min(x.size, _SAMPLES)).astype(int))
    with np.errstate(all="ignore"):
        jac = np.moveaxis(np.asarray(compiled.jac(x[at], outcome.y[:, at], outcome.p, k)), -1, 0)
        if not np.isfinite(jac).all():
            return math.inf
        return float(np.max(np.abs(np.linalg.eigvals(jac)))) * float(x[-1] - x[0])


def _likely_cause(compiled, outcome: Outcome, k: np.ndarray) -> str:  # noqa: ANN001
    """The likely cause of a nearly singular problem, and what to do, in words."""
    x, y, p = outcome.x, outcome.y, outcome.p
    with np.errstate(all="ignore"):
        zero = np.zeros_like(y)
        homogeneous = (np.allclose(compiled.rhs(x, zero, p, k), 0.0, atol=1e-300)
                       and np.allclose(compiled.bc(zero[:, 0], zero[:, -1], p, k), 0.0, atol=1e-300))
        scale = 1.0 + float(np.max(np.abs(y)))
        shifted = y + scale * np.cos(np.arange(y.shape[0]))[:, None]  # another state, far from y
        jac, other = compiled.jac(x, y, p, k), compiled.jac(x, shifted, p, k)
        linear = bool(np.all(np.isfinite(jac)) and np.allclose(jac, other, rtol=1e-10, atol=1e-12))
    size = float(np.max(np.abs(y[compiled.layout.user_rows]))) if y.size else 0.0
    if homogeneous and linear:
        which = "the zero solution was found" if size < 1e-8 else "a solution was found"
        return (f"the problem is homogeneous (zero conditions and no forcing) and {which}, but a non-zero "
                "solution, and any multiple of it, very likely solves it too (an eigenvalue of the problem "
                "is at or next to these constants); add a normalisation (a condition such as y'(0) = 1), or "
                "state it as an eigenvalue problem")
    if linear:
        return ("the problem is linear and close to a resonance (its homogeneous version has a non-zero "
                "solution for nearby values of the constants), so the answer is very sensitive to the "
                "constants; check them, and trace one (bvpkit trace) to see the sensitivity")
    return ("a fold or branch point of the family of solutions is likely nearby (another solution may be "
            "close); trace a constant through this value (bvpkit trace) to see the family, and give a guess "
            "to pick a branch")


def place(compiled, p: np.ndarray, k: np.ndarray):  # noqa: ANN001, ANN201
    """How a point of the standard variable reads in the user's variable, for messages."""
    with np.errstate(all="ignore"):
        maps = np.asarray(compiled.maps(p, k), float)
    name = compiled.layout.independent

    def where(t: float) -> str:
        xs = physical(np.array([float(t)]), maps, compiled.layout.stretch)[:, 0]
        if xs.size == 1:
            return f"{name} = {xs[0]:.6g}"
        return f"{name} = " + " / ".join(f"{x:.6g}" for x in xs) + " (the same place in each region)"

    return where
