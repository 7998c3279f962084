"""Infinite ends: truncated at a length chosen while solving, moved out until the answer stops
changing.

The region that reaches an infinite end is mapped onto ``[0, 1]`` over the length
``_length`` (a constant of the standard form: values change without new code): ``x = a +
L t`` for ``(a, inf)``, ``x = b - L + L t`` for ``(-inf, b)`` and ``x = L (2 t - 1)`` for
``(-inf, inf)``. The user's conditions at infinity are imposed there.

Around a solve (:meth:`Infinite.around`), the length starts at the ``truncation`` option and
grows by :data:`GROWTH` (each solve started from the previous one) until the states on the
common interval change by less than half the tolerance. Each truncated solve is
error-controlled to an eighth of the tolerance, so the change measures truncation rather
than discretisation noise, and the reported error estimate (the sum of both) meets the
tolerance when the solve succeeds. Along a trace (:meth:`Infinite.along`), the length the
first point chose is kept while the far field stays settled, and moved out when it does not.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from .._lazy import LazyModule
from ..methods.diagnostics import hermite
from ..status import Status
from .mapping import Start, carried, positions
from .transform import Transform, register

sp = LazyModule("sympy")

#: Name of the constant that holds the truncation length (user names cannot start with "_").
LENGTH = "_length"
#: First placement of an infinite end, measured from the finite one (0 when both are infinite).
DEFAULT_TRUNCATION = 10.0
GROWTH = 1.5  # lengthening factor of a truncated domain
MAX_LENGTHENINGS = 12  # 1.5**12 ~ 130: from 10 to ~1300 units before giving up
_SHARE_TRUNCATION = 0.5  # part of the tolerance allowed to truncation
_SHARE_DISCRETISATION = 0.125  # each truncated solve's error target: two of them stay below tol/4
_TAIL = 0.9  # the far-field check of a trace compares the states at t = 1 and t = 0.9


@register
@dataclass(frozen=True)
class Infinite(Transform):
    """Infinite ends (``infinite``: left, right) truncated at ``_length``; ``power`` is the
    power of the map of a stretched region (the length is ``_length**power``)."""

    kind = "infinite"
    infinite: tuple[bool, bool] = (False, True)
    power: int = 1

    # -- symbolic -------------------------------------------------------------------------
    @classmethod
    def applies(cls, problem) -> bool:  # noqa: ANN001
        return any(problem.infinite)

    @classmethod
    def names(cls, problem, names) -> None:  # noqa: ANN001
        names.constants.append(LENGTH)

    @classmethod
    def maps(cls, work) -> None:  # noqa: ANN001
        length = work.names.symbol(LENGTH)
        for r, (left, right) in enumerate(zip(work.ends[:-1], work.ends[1:])):
            left_inf, right_inf = left in (sp.oo, -sp.oo), right in (sp.oo, -sp.oo)
            if left_inf and right_inf:
                work.maps[r] = (-length, 2 * length)
            elif right_inf:
                work.maps[r] = (left, length)
            elif left_inf:
                work.maps[r] = (right - length, length)

    @classmethod
    def finish(cls, work) -> Infinite:  # noqa: ANN001
        return cls(tuple(bool(v) for v in work.problem.infinite), int(work.power) if len(work.systems) == 1 else 1)

    @classmethod
    def read(cls, fields) -> Infinite:  # noqa: ANN001
        ends, power = fields.get("infinite"), fields.get("power")
        if (set(fields) != {"infinite", "power"} or not isinstance(ends, list) or len(ends) != 2
                or not all(isinstance(v, bool) for v in ends) or not any(ends)
                or isinstance(power, bool) or not isinstance(power, int) or not 1 <= power <= 6):
            raise ValueError("infinite: two flags and a power expected")
        return cls(tuple(ends), power)

    # -- numerical ------------------------------------------------------------------------
    def constants(self, options) -> dict[str, float]:  # noqa: ANN001
        truncation = DEFAULT_TRUNCATION if options is None else float(options.truncation)
        return {LENGTH: truncation ** (1.0 / self.power)}

    def length(self, prepared, k: np.ndarray) -> float:  # noqa: ANN001
        """The truncation length in the user's variable (``_length`` is in the stretched
        variable ``xi`` of a region mapped by ``x = a + xi**d``: the length is ``_length**d``)."""
        return float(k[prepared.layout.constants.index(LENGTH)]) ** self.power

    def _at(self, prepared, k: np.ndarray, length: float) -> np.ndarray:  # noqa: ANN001
        """The constants ``k`` with the infinite end placed ``length`` from the finite one."""
        k = np.array(k, float)
        k[prepared.layout.constants.index(LENGTH)] = length ** (1.0 / self.power)
        return k

    def ends(self, ends: list[float]) -> list[float]:
        ends = list(ends)
        if self.infinite[0]:
            ends[0] = -math.inf
        if self.infinite[1]:
            ends[-1] = math.inf
        return ends

    def describe(self, prepared, run, ends: tuple[float, float]) -> str:  # noqa: ANN001
        run.notes.setdefault("truncation_length", self.length(prepared, run.k))
        run.notes["truncation_error"] = run.extra_error
        placed = [f"{v:.4g}" for v, inf in zip(ends, self.infinite) if inf]
        change = run.extra_error
        how = (f"the solution changed by {change:.2g} from the last shorter domain"
               if change is not None and math.isfinite(change) else "held there along a trace")
        return f"infinity placed at {run.independent} = {' and '.join(placed)} ({how})"

    def around(self, solve):  # noqa: ANN001, ANN201
        """The solve in a loop that moves infinity out until the solution stops changing."""

        def lengthened(job):  # noqa: ANN001, ANN202
            return self._lengthen(solve, job)

        return lengthened

    def _lengthen(self, solve, job):  # noqa: ANN001, ANN202
        prepared = job.prepared
        compiled = prepared.compiled
        tol = job.tol
        # Every truncated solve is error-controlled to a fraction of the tolerance, so that the
        # change between two lengths measures truncation, not the noise of two discretisations.
        inner = dataclasses.replace(job, tol=tol * _SHARE_DISCRETISATION)
        length = self.length(prepared, job.k)
        start = _as_start(job.guess)
        if start is not None:
            # a previous solution already knows a good length: start there (continuation, sweeps)
            length = max(length, self.length(prepared, start.k))
        growth = GROWTH ** self.power  # by GROWTH in the variable t of a stretched map
        attempts: list = []
        previous = None
        change = math.inf
        run = None
        for _ in range(MAX_LENGTHENINGS):
            k = self._at(prepared, job.k, length)
            if previous is None:
                here = dataclasses.replace(inner, k=k)
            else:
                ratio = (self.length(prepared, previous.k) / length) ** (1.0 / self.power)  # in t
                t = self._extended_mesh(previous.outcome.x, ratio, compiled.layout)
                p = previous.outcome.p.copy()
                last = Start(compiled, previous.outcome.x, previous.outcome.y, previous.outcome.p, previous.k)
                y = carried(last, compiled, t, p, k)
                with np.errstate(all="ignore"):
                    if not np.isfinite(compiled.rhs(t, y, p, k)).all():
                        # continued along its slope the solution left the equations' domain (a
                        # decaying y under y**1.5): held at its far-end values instead
                        y = carried(last, compiled, t, p, k, hold=True)
                here = dataclasses.replace(inner, k=k, guess=Start(compiled, t, y, p, k))
            run = solve(here)
            attempts += run.attempts
            run.attempts = attempts
            run.tol = tol
            if not run.outcome.ok:
                if previous is None:
                    run.notes["truncation_length"] = length
                    return run
                break
            if previous is not None:
                change = truncation_change(
                    Start(compiled, previous.outcome.x, previous.outcome.y, previous.outcome.p, previous.k),
                    Start(compiled, run.outcome.x, run.outcome.y, run.outcome.p, k))
                if change <= _SHARE_TRUNCATION * tol:
                    run.extra_error = change
                    run.notes["truncation_length"] = length
                    run.previous = Start(compiled, previous.outcome.x, previous.outcome.y, previous.outcome.p,
                                         previous.k)
                    return run
            previous = run
            length *= growth
        assert run is not None and previous is not None
        shorter = length / growth
        if run.outcome.ok:
            run.outcome.status = Status.TRUNCATION
            run.outcome.message = (f"the solution still changed by {change:.2g} when infinity was moved out to "
                                   f"{shorter:.4g}; " + Status.TRUNCATION.hint)
            run.extra_error = change
            run.notes["truncation_length"] = shorter
            return run
        # A longer domain failed: hand back the last converged one, marked as not settled.
        failed = run.outcome.message
        previous.outcome.status = Status.TRUNCATION
        at = self.length(prepared, previous.k)
        previous.outcome.message = (
            f"the solve failed when infinity was moved out to {length:.4g} ({failed}); the solution shown "
            f"stops at a length of {at:.4g} and had not settled (last change {change:.2g})"
        )
        previous.attempts = attempts
        previous.extra_error = change
        previous.notes["truncation_length"] = at
        return previous

    def _extended_mesh(self, t: np.ndarray, ratio: float, layout) -> np.ndarray:  # noqa: ANN001
        """The standard mesh after an infinite end moved out by ``1 / ratio``: the old points where
        they were in the user's variable, new ones beyond at the spacing of the old far end."""
        if layout.regions > 1:
            return t.copy()  # other regions keep their mesh; the far region is read by interpolation
        if all(self.infinite):  # x = L (2 t - 1): the old mesh shrinks towards the middle
            old = 0.5 + (t - 0.5) * ratio
        elif self.infinite[1]:
            old = t * ratio
        else:
            old = 1.0 - (1.0 - t) * ratio
        h = max(float(np.diff(old[-5:]).mean()), 1.0 / 400)
        pieces = [old]
        if old[-1] < 1.0:
            pieces.append(np.linspace(old[-1], 1.0, max(2, int(math.ceil((1.0 - old[-1]) / h)) + 1))[1:])
        if old[0] > 0.0:
            pieces.insert(0, np.linspace(0.0, old[0], max(2, int(math.ceil(old[0] / h)) + 1))[:-1])
        mesh = np.concatenate(pieces)
        mesh[0], mesh[-1] = 0.0, 1.0
        return mesh

    def along(self, solution, resolve, tol: float):  # noqa: ANN001, ANN201
        """Hold the truncation unless the far field says otherwise: the change of each state
        (of its value or of its slope) over the far tenth of the infinite region must be
        within ``tol``; else infinity moves out (re-solving through ``resolve(k, guess)``)
        until the solution stops changing."""
        if not solution.success:
            return solution
        prepared = solution.prepared
        compiled = prepared.compiled
        view = solution.interpolant
        layout = view.layout
        size = layout.region_size
        rows = slice((layout.regions - 1) * size, layout.regions * size)
        spline = hermite(compiled, view.t, view.y, view.p, view.k)

        def settled(points: np.ndarray, part: slice) -> np.ndarray:
            # per state: the smaller of the relative changes of its value and of its slope
            # over the tail (a state that grows linearly there, like the stream function of a
            # boundary layer, has settled when its slope has)
            y = spline(points)
            with np.errstate(all="ignore"):
                f = np.asarray(compiled.rhs(points, y, view.p, view.k), float)
            y, f = y[part], f[part]
            value = np.abs(y[:, 1] - y[:, 0]) / (1.0 + np.abs(y[:, 1]))
            slope = np.abs(f[:, 1] - f[:, 0]) / (1.0 + np.abs(f[:, 1]))
            return np.fmin(value, np.where(np.isfinite(slope), slope, np.inf))

        change = settled(np.array([_TAIL, 1.0]), rows) if self.infinite[1] else np.zeros(0)
        if self.infinite[0]:
            change = np.concatenate([change, settled(np.array([1 - _TAIL, 0.0]), slice(0, size))])
        if float(np.max(change, initial=0.0)) <= tol:
            return solution
        current = solution
        for _ in range(MAX_LENGTHENINGS):  # as the truncation loop of solve
            view = current.interpolant
            k = self._at(prepared, view.k, self.length(prepared, view.k) * GROWTH ** self.power)
            longer = resolve(k, current)
            if not longer.success:
                return current
            done = Start(compiled, view.t, view.y, view.p, view.k)
            moved = Start(compiled, longer.interpolant.t, longer.interpolant.y, longer.interpolant.p, k)
            if truncation_change(done, moved) <= _SHARE_TRUNCATION * tol:
                return current
            # infinity moves out, for this and later points, until the solution stops changing
            current = longer
        return current




def _as_start(guess) -> Start | None:  # noqa: ANN001
    """A previous solution (or a start) given as the guess, as a :class:`Start`; else None."""
    if isinstance(guess, Start):
        return guess
    view = getattr(guess, "interpolant", None)
    return None if view is None else Start(view.compiled, view.t, view.y, view.p, view.k)


def truncation_change(old: Start, new: Start) -> float:
    """How much a solution changed when infinity moved out (``new`` on the longer domain):
    the largest relative change of the states on ``old``'s mesh, and of the parameters."""
    theirs = carried(new, old.compiled, old.t, old.p, old.k)
    change = float(np.max(np.abs(old.y - theirs) / (1.0 + np.abs(theirs))))
    if old.p.size:
        change = max(change, float(np.max(np.abs(old.p - new.p) / (1.0 + np.abs(new.p)))))
    return change


__all__ = ["DEFAULT_TRUNCATION", "GROWTH", "Infinite", "LENGTH", "MAX_LENGTHENINGS", "positions", "truncation_change"]
