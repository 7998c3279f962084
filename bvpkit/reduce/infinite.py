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

Both ends may be infinite: a single region ``(-inf, inf)`` is truncated to ``(-L, L)``; a
point inside where a condition takes a value (the phase condition ``u(0) = 1/2`` of a
travelling front) makes two regions, ``(-inf, 0)`` and ``(0, inf)``, each truncated at the
same ``L``.

**Algebraic decay** (asymptotic boundary conditions). Imposed as written at the truncation
point, ``y(inf) = 0`` costs an error of the size of the solution there, which shrinks only
like a power of ``L`` when the solution decays like one (``y = 1/(1 + x)``). Each infinite
end whose conditions involve that end alone therefore carries a linear map of its user
states, ``Y -> M Y + c`` (constants ``_farM<e>_<i>_<j>`` and ``_farC<e>_<i>``; ``e`` 0 for
the left end, 1 for the right), applied before the conditions there are evaluated. It is
the identity (the conditions as written) unless the linearised far field is of Euler type
at the truncation point: with ``u = x - x0`` and the scaled states ``Z_i = u**o_i Y_i``
(``o_i`` the derivative order of state ``i``), ``u dZ/du = B Z`` with ``B = diag(o) +
(A_ij u**(1 + o_i - o_j))``, ``A`` the Jacobian of the equations, and the far field is of
Euler type when ``B`` is nearly the same at the truncation point and at a point inside
(``x0`` chosen to make it so; checked numerically before each truncated solve). Its modes
then behave like ``u**lam`` with ``lam`` the eigenvalues of ``B``; the decaying ones
(``Re lam < 0``) vanish at infinity, so the state there is the state at the truncation
point less its decaying part, ``Z - K u Z'`` with ``K`` the inverse of ``B`` on the decaying
modes (``u Z' = B (Z - Z_inf)``, with the equations' right-hand side linearised about the
last solution), and the user's conditions are imposed on that. When as many conditions are
given as the far field has non-decaying modes, this holds the growing modes at zero and
fixes the constant ones, with a truncation error that falls much faster than the solution
(the projection onto the non-growing modes of the far field: de Hoog and Weiss, "An
approximation theory for boundary value problems on infinite intervals", Computing 24
(1980) 227-239; Lentini and Keller, "Boundary value problems on semi-infinite intervals
and their numerical solution", SIAM J. Numer. Anal. 17 (1980) 577-604). Far fields that
decay exponentially (a boundary layer, a front, a bound state) are left with the conditions
as written, where the truncation error is already exponentially small.
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
#: An infinite end carries the map of its far field (the asymptotic condition) when a region
#: has at most this many user states (the map has n**2 + n constants).
_FAR_STATES = 6
#: The far field is of Euler type when ``B`` at the truncation point and at a point inside
#: differ by at most this much, relative to ``1 + |B|`` (Frobenius norms; common practice, no source).
_EULER_MISMATCH = 0.05
#: Exponents ``lam`` of the far field with ``|Re lam|`` at most this are taken as constant modes.
_NEUTRAL = 0.02


def far_names(end: int, users: int) -> list[str]:
    """The constants of the far-field map ``Y -> M Y + c`` of an end (0 left, 1 right):
    ``M`` row by row, then ``c``."""
    return ([f"_farM{end}_{i}_{j}" for i in range(users) for j in range(users)]
            + [f"_farC{end}_{i}" for i in range(users)])


def _far_rows(problem) -> tuple[tuple[int, ...], tuple[int, ...]]:  # noqa: ANN001
    """Per end (left, right), the conditions that hold at that infinite end alone (indices in
    the problem's conditions), when every condition there does and the region is small
    enough for the far-field map; else ``()``. Not for a complex problem (its states are
    split into real and imaginary parts after this class has run: the conditions as written)."""
    from ..language.expr import DomainIntegral

    if getattr(problem, "complex", False):
        return (), ()
    users = sum(problem.orders.values())
    last = len(problem.points) - 1
    found: list[tuple[int, ...]] = []
    for end, point in ((0, 0), (1, last)):
        if not problem.infinite[end] or users > _FAR_STATES:
            found.append(())
            continue
        rows, alone = [], True
        for i, c in enumerate(problem.conditions):
            where = {problem.which_point(pv.point) for pv in problem.point_values(c)}
            if point in where:
                rows.append(i)
                alone = alone and where == {point} and not c.has(DomainIntegral)
        found.append(tuple(rows) if alone else ())
    return found[0], found[1]


@register
@dataclass(frozen=True)
class Infinite(Transform):
    """Infinite ends (``infinite``: left, right) truncated at ``_length``; ``power`` is the
    power of the map of a stretched region (the length is ``_length**power``); ``far`` per
    end the conditions that hold there alone (their rows), imposed through the end's
    far-field map (empty: that end has none, its conditions are imposed as written)."""

    kind = "infinite"
    infinite: tuple[bool, bool] = (False, True)
    power: int = 1
    far: tuple[tuple[int, ...], tuple[int, ...]] = ((), ())
    users: int = 0

    # -- symbolic -------------------------------------------------------------------------
    @classmethod
    def applies(cls, problem) -> bool:  # noqa: ANN001
        return any(problem.infinite)

    @classmethod
    def names(cls, problem, names) -> None:  # noqa: ANN001
        names.constants.append(LENGTH)
        users = sum(problem.orders.values())
        for end, rows in enumerate(_far_rows(problem)):
            if rows:
                names.constants.extend(far_names(end, users))

    @classmethod
    def conditions(cls, work) -> None:  # noqa: ANN001
        """The conditions at an infinite end evaluated on the far-field map of its states,
        ``Y -> M Y + c`` (the identity unless the far field is of Euler type)."""
        users = len(work.user_states)
        for end, rows in enumerate(_far_rows(work.problem)):
            if not rows:
                continue
            point, side = (0, 1) if end == 0 else (work.last, -1)
            names = far_names(end, users)
            M = [[work.names.symbol(names[i * users + j]) for j in range(users)] for i in range(users)]
            c = [work.names.symbol(names[users * users + i]) for i in range(users)]
            v = [work.value(i, point, side) for i in range(users)]
            mapped = {v[i]: sum((M[i][j] * v[j] for j in range(users)), c[i]) for i in range(users)}
            for row in rows:
                condition, kind = work.conditions[row]
                work.conditions[row] = (condition.xreplace(mapped), kind)

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
        return cls(tuple(bool(v) for v in work.problem.infinite), int(work.power) if len(work.systems) == 1 else 1,
                   _far_rows(work.problem), len(work.user_states))

    @classmethod
    def read(cls, fields) -> Infinite:  # noqa: ANN001
        ends, power, far, users = (fields.get(name) for name in ("infinite", "power", "far", "users"))
        if (set(fields) != {"infinite", "power", "far", "users"} or not isinstance(ends, list) or len(ends) != 2
                or not all(isinstance(v, bool) for v in ends) or not any(ends)
                or isinstance(power, bool) or not isinstance(power, int) or not 1 <= power <= 6
                or isinstance(users, bool) or not isinstance(users, int) or not 1 <= users <= 10_000
                or not isinstance(far, list) or len(far) != 2 or not all(isinstance(rows, list) for rows in far)
                or not all(isinstance(i, int) and not isinstance(i, bool) and 0 <= i < 100_000
                           for rows in far for i in rows)):
            raise ValueError("infinite: two flags, a power, the far-field rows and a state count expected")
        return cls(tuple(ends), power, (tuple(far[0]), tuple(far[1])), users)

    # -- numerical ------------------------------------------------------------------------
    def constants(self, options) -> dict[str, float]:  # noqa: ANN001
        truncation = DEFAULT_TRUNCATION if options is None else float(options.truncation)
        values = {LENGTH: truncation ** (1.0 / self.power)}
        for end, rows in enumerate(self.far):
            if rows:
                values.update(_far_values(end, np.eye(self.users), np.zeros(self.users)))
        return values

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

    # -- the far-field map (asymptotic conditions) ------------------------------------------
    def fitted(self, prepared, k: np.ndarray, reference) -> np.ndarray:  # noqa: ANN001
        """``k`` with each end's far-field map fitted at the truncation point ``k`` places,
        the equations linearised about ``reference`` (a :class:`Start`, carried onto ``k``):
        the identity where the far field is not of Euler type (see the module docstring)."""
        k = np.array(k, float)
        if not any(self.far):
            return k
        index = {name: i for i, name in enumerate(prepared.layout.constants)}
        for end, rows in enumerate(self.far):
            if not rows:
                continue
            t_near = 0.5 if prepared.layout.regions == 1 and all(self.infinite) else float(1 - end)
            found = _euler_map(prepared.compiled, reference, _with_identity(k, index, end, self.users), end, rows,
                               self.users, t_near)
            M, c = found if found is not None else (np.eye(self.users), np.zeros(self.users))
            for name, value in _far_values(end, M, c).items():
                k[index[name]] = value
        return k

    def asymptotic(self, prepared, k: np.ndarray) -> list[int]:  # noqa: ANN001
        """The ends (0 left, 1 right) whose far-field map is not the identity at ``k``."""
        index = {name: i for i, name in enumerate(prepared.layout.constants)}
        found = []
        for end, rows in enumerate(self.far):
            if rows:
                values = np.array([k[index[name]] for name in far_names(end, self.users)])
                if not np.array_equal(values, np.array(list(_far_values(end, np.eye(self.users),
                                                                        np.zeros(self.users)).values()))):
                    found.append(end)
        return found

    def describe(self, prepared, run, ends: tuple[float, float]) -> str:  # noqa: ANN001
        run.notes.setdefault("truncation_length", self.length(prepared, run.k))
        run.notes["truncation_error"] = run.extra_error
        placed = [f"{v:.4g}" for v, inf in zip(ends, self.infinite) if inf]
        change = run.extra_error
        how = (f"the solution changed by {change:.2g} from the last shorter domain"
               if change is not None and math.isfinite(change) else "held there along a trace")
        text = f"infinity placed at {run.independent} = {' and '.join(placed)} ({how})"
        asymptotic = self.asymptotic(prepared, run.k)
        if asymptotic:
            which = " and ".join(("-inf", "inf")[end] for end in asymptotic)
            text += (f"; the far field at {which} is algebraic (powers of {run.independent}), so the conditions "
                     "there were imposed on the part of the solution that does not decay")
        return text

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
        changes: list[float] = []  # the change at each lengthening, to say how it falls
        run = None
        fit = any(self.far)  # the far-field map is fitted before each solve (the identity unless Euler type)
        for _ in range(MAX_LENGTHENINGS):
            k = self._at(prepared, job.k, length)
            if previous is None:
                if start is not None and fit:
                    k = self.fitted(prepared, k, start)
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
                if fit:
                    k = self.fitted(prepared, k, last)
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
            if previous is None and fit and start is None:
                run, fit = self._refitted(solve, inner, run, attempts)
            if previous is not None:
                change = truncation_change(
                    Start(compiled, previous.outcome.x, previous.outcome.y, previous.outcome.p, previous.k),
                    Start(compiled, run.outcome.x, run.outcome.y, run.outcome.p, run.k))
                changes.append(change)
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
                                   f"{shorter:.4g}; " + (_slow_decay(changes, growth) or Status.TRUNCATION.hint))
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

    def _refitted(self, solve, inner, run, attempts: list):  # noqa: ANN001, ANN202
        """After the first truncated solve (the conditions as written): when the far field is
        of Euler type there, the same length solved again with the far-field map fitted to
        that solution. Returns the run to go on from and whether to keep fitting."""
        prepared = inner.prepared
        compiled = prepared.compiled
        done = Start(compiled, run.outcome.x, run.outcome.y, run.outcome.p, run.k)
        k = self.fitted(prepared, run.k, done)
        if np.array_equal(k, run.k):
            return run, True
        again = solve(dataclasses.replace(inner, k=k, guess=Start(compiled, done.t, done.y, done.p, k)))
        attempts += again.attempts
        again.attempts = attempts
        again.tol = run.tol
        if not again.outcome.ok:  # the far field's conditions did not solve: the conditions as written
            return run, False
        return again, True

    def _extended_mesh(self, t: np.ndarray, ratio: float, layout) -> np.ndarray:  # noqa: ANN001
        """The standard mesh after an infinite end moved out by ``1 / ratio``: the old points where
        they were in the user's variable, new ones beyond at the spacing of the old far end.

        Several regions share one ``t``, and a point the old mesh holds for one region (the
        front of a travelling wave, near ``t = 1`` of the region on its left) would land in the
        far field of another once moved: merging each region's moved mesh keeps such points
        in every region and grows the mesh at each lengthening, so the mesh is kept as it was
        (collocation refines it where the moved solution asks)."""
        if layout.regions > 1:
            return t.copy()
        return _stretched(t, ratio, self.infinite[0], self.infinite[1])

    def along(self, solution, resolve, tol: float):  # noqa: ANN001, ANN201
        """Hold the truncation unless the far field says otherwise: the change of each state
        (of its value or of its slope) over the far tenth of the infinite region must be
        within ``tol``; else infinity moves out (re-solving through ``resolve(k, guess)``)
        until the solution stops changing. An end whose conditions are imposed on its far
        field (algebraic decay, where the states keep changing out to any length) is checked
        by fitting that map again to the point: when the point solved with it differs by more
        than the truncation's share of ``tol``, that one is kept (the map held for later points)."""
        if not solution.success:
            return solution
        prepared = solution.prepared
        compiled = prepared.compiled
        view = solution.interpolant
        layout = view.layout
        size = layout.region_size
        asymptotic = self.asymptotic(prepared, view.k)
        if asymptotic:
            here = Start(compiled, view.t, view.y, view.p, view.k)
            k = self.fitted(prepared, view.k, here)
            if not np.array_equal(k, view.k):
                refitted = resolve(k, solution)
                if refitted.success:
                    moved = Start(compiled, refitted.interpolant.t, refitted.interpolant.y, refitted.interpolant.p, k)
                    if truncation_change(here, moved) > _SHARE_TRUNCATION * tol:
                        solution = refitted
                        view = solution.interpolant
            asymptotic = self.asymptotic(prepared, view.k)
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

        change = np.zeros(0)
        if self.infinite[1] and 1 not in asymptotic:
            change = settled(np.array([_TAIL, 1.0]), slice((layout.regions - 1) * size, layout.regions * size))
        if self.infinite[0] and 0 not in asymptotic:
            change = np.concatenate([change, settled(np.array([1 - _TAIL, 0.0]), slice(0, size))])
        if float(np.max(change, initial=0.0)) <= tol:
            return solution
        current = solution
        for _ in range(MAX_LENGTHENINGS):  # as the truncation loop of solve
            view = current.interpolant
            done = Start(compiled, view.t, view.y, view.p, view.k)
            k = self._at(prepared, view.k, self.length(prepared, view.k) * GROWTH ** self.power)
            if any(self.far):
                k = self.fitted(prepared, k, done)
            longer = resolve(k, current)
            if not longer.success:
                return current
            moved = Start(compiled, longer.interpolant.t, longer.interpolant.y, longer.interpolant.p, k)
            if truncation_change(done, moved) <= _SHARE_TRUNCATION * tol:
                return current
            # infinity moves out, for this and later points, until the solution stops changing
            current = longer
        return current


def _stretched(t: np.ndarray, ratio: float, left: bool, right: bool) -> np.ndarray:
    """One region's mesh after its infinite ends (``left``, ``right``) moved out by ``1 / ratio``."""
    if left and right:  # x = L (2 t - 1): the old mesh shrinks towards the middle
        old = 0.5 + (t - 0.5) * ratio
    elif right:
        old = t * ratio
    elif left:
        old = 1.0 - (1.0 - t) * ratio
    else:
        return t.copy()
    pieces = [old]
    if old[-1] < 1.0:
        h = max(float(np.diff(old[-5:]).mean()), 1.0 / 400)
        pieces.append(np.linspace(old[-1], 1.0, max(2, int(math.ceil((1.0 - old[-1]) / h)) + 1))[1:])
    if old[0] > 0.0:
        h = max(float(np.diff(old[:5]).mean()), 1.0 / 400)
        pieces.insert(0, np.linspace(0.0, old[0], max(2, int(math.ceil(old[0] / h)) + 1))[:-1])
    mesh = np.concatenate(pieces)
    mesh[0], mesh[-1] = 0.0, 1.0
    return mesh


def _golden(f, a: float, b: float, steps: int = 60) -> tuple[float, float]:  # noqa: ANN001
    """The minimiser of ``f`` on ``[a, b]`` by golden-section search, and its value."""
    ratio = (math.sqrt(5.0) - 1.0) / 2.0
    c, d = b - ratio * (b - a), a + ratio * (b - a)
    fc, fd = f(c), f(d)
    for _ in range(steps):
        if fc <= fd:
            b, d, fd = d, c, fc
            c = b - ratio * (b - a)
            fc = f(c)
        else:
            a, c, fc = c, d, fd
            d = a + ratio * (b - a)
            fd = f(d)
    return (c, fc) if fc <= fd else (d, fd)


def _far_values(end: int, M: np.ndarray, c: np.ndarray) -> dict[str, float]:
    """The constants of an end's far-field map ``Y -> M Y + c`` by name."""
    values = [*np.asarray(M, float).ravel(), *np.asarray(c, float)]
    return dict(zip(far_names(end, len(c)), (float(v) for v in values)))


def _with_identity(k: np.ndarray, index: dict, end: int, users: int) -> np.ndarray:
    """``k`` with the far-field map of ``end`` set to the identity (the conditions as written)."""
    k = np.array(k, float)
    for name, value in _far_values(end, np.eye(users), np.zeros(users)).items():
        k[index[name]] = value
    return k


def _euler_map(compiled, reference, k: np.ndarray, end: int, rows: tuple, users: int,  # noqa: ANN001, ANN202
               t_near: float):
    """The far-field map ``(M, c)`` of an infinite end (0 left, 1 right) at the truncation
    point ``k`` places, or None where the far field is not of Euler type or the conditions
    there do not match its non-decaying modes (see the module docstring). ``k`` holds the
    identity map of that end; ``reference`` is the solution the equations are linearised
    about; ``t_near`` is where the region's distances are measured from (its finite end, or
    its middle when both its ends are infinite)."""
    layout = compiled.layout
    size = layout.region_size
    r = 0 if end == 0 else layout.regions - 1
    d = layout.power(r)
    with np.errstate(all="ignore"):
        maps = np.asarray(compiled.maps(reference.p, k), float)
    c0, h = maps[r]
    # the truncation point, and a point inside at 1/GROWTH of the distance from the region's near end
    t_end = 1.0 if end == 1 else 0.0
    t_in = t_near + (t_end - t_near) / GROWTH
    t = np.array(sorted([t_in, t_end]))
    y = carried(reference, compiled, t, reference.p, k)
    here = slice(r * size, r * size + users)
    with np.errstate(all="ignore"):
        rate = h * d * t ** (d - 1)
        f = np.asarray(compiled.rhs(t, y, reference.p, k), float)[here] / rate
        A = np.asarray(compiled.jac(t, y, reference.p, k), float)[here, here] / rate
    x = c0 + h * t**d
    near = c0 + h * t_near**d
    at_end, at_in = (1, 0) if end == 1 else (0, 1)
    if not (np.isfinite(f).all() and np.isfinite(A).all() and np.isfinite(x).all()):
        return None
    orders = np.array([layout.states[i][1] for i in range(users)], float)
    sigma = 1.0 if end == 1 else -1.0
    distance = sigma * (x[at_end] - near)
    if not distance > 0:
        return None
    exponent = 1.0 + orders[:, None] - orders[None, :]

    def scaled(u: float, J: np.ndarray) -> np.ndarray:
        with np.errstate(all="ignore"):
            return np.diag(orders) + J * np.sign(u) ** exponent * np.abs(u) ** exponent

    def mismatch(s: float) -> float:
        # s: the distance of the truncation point from the Euler centre x0 (in the far direction)
        u_end = sigma * s
        u_in = u_end - (x[at_end] - x[at_in])
        B_end, B_in = scaled(u_end, A[:, :, at_end]), scaled(u_in, A[:, :, at_in])
        value = np.linalg.norm(B_end - B_in) / (1.0 + np.linalg.norm(B_end))
        return float(value) if math.isfinite(value) else math.inf

    # the centre x0 at most the distance behind the near end, and the point inside at least a
    # third of the distance from it
    low, high = distance * (1.0 - 1.0 / GROWTH) * 2.0, 2.0 * distance
    grid = np.linspace(low, high, 33)
    values = [mismatch(s) for s in grid]
    best = int(np.argmin(values))
    if not values[best] <= 4 * _EULER_MISMATCH:  # far from Euler type anywhere: no refinement
        return None
    s, worst = _golden(mismatch, grid[max(best - 1, 0)], grid[min(best + 1, grid.size - 1)])
    if not worst <= values[best]:
        s, worst = float(grid[best]), values[best]
    if not worst <= _EULER_MISMATCH:
        return None
    u = sigma * s
    A_end, f_end, y_end = A[:, :, at_end], f[:, at_end], y[here, at_end]
    B = scaled(u, A_end)
    try:
        lam, V = np.linalg.eig(B)
        W = np.linalg.inv(V)
    except np.linalg.LinAlgError:
        return None
    if not (np.isfinite(lam).all() and np.isfinite(W).all()):
        return None
    scale = max(1.0, float(np.max(np.abs(lam))))
    decaying = lam.real < -_NEUTRAL * scale
    kept = ~decaying  # growing and constant modes: as many as the conditions given there
    if int(np.count_nonzero(kept)) != len(rows):
        return None
    # the conditions must see every non-decaying mode (else the far field leaves them free)
    with np.errstate(all="ignore"):
        ends = carried(reference, compiled, np.array([0.0, 1.0]), reference.p, k)
        ba, bb, _ = compiled.bc_jac(ends[:, 0], ends[:, 1], reference.p, k)
    G = np.asarray(ba if end == 0 else bb, float)[list(rows)][:, here]
    D = np.abs(u) ** orders * np.sign(u) ** orders  # Z = D Y
    modes = V[:, kept] / D[:, None]
    if len(rows):
        seen = np.linalg.svd(G @ modes, compute_uv=False) if np.isfinite(G).all() else np.zeros(1)
        if seen.size == 0 or not seen[-1] > 1e-8 * max(float(np.linalg.norm(G)) * float(np.linalg.norm(modes)),
                                                       1e-300):
            return None
    K = (V[:, decaying] / lam[decaying]) @ W[decaying]
    if not np.any(decaying):
        return np.eye(users), np.zeros(users)
    # Z_inf = Z - K u Z',  u Z' = diag(o) Z + u D F,  F = f + A (Y - y): back in Y by 1/D
    inverse = 1.0 / D
    M = np.eye(users) - inverse[:, None] * (K @ (np.diag(orders * D) + u * D[:, None] * A_end))
    c = -u * inverse * (K @ (D * (f_end - A_end @ y_end)))
    M, c = M.real, c.real
    if not (np.isfinite(M).all() and np.isfinite(c).all()):
        return None
    return M, c


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


def _slow_decay(changes: list[float], growth: float) -> str:
    """Words for changes that fall steadily but too slowly: like a power ``L**-q`` of the length
    (q from the last three changes), the mark of a solution that approaches its limit like a
    power of x where the linearised equations show no such far field (a nonlinear one, such as
    y'' = 2*y**3 with y = 1/(1 + x)). Empty when the changes do not fall like that."""
    last = [c for c in changes[-3:] if math.isfinite(c) and c > 0]
    if len(last) < 3:
        return ""
    rates = [math.log(a / b) / math.log(growth) for a, b in zip(last, last[1:])]
    if not all(0.2 < q < 4 for q in rates) or abs(rates[0] - rates[1]) > 0.3 * max(rates):
        return ""
    q = rates[-1]
    return (f"the change falls only like L^-{q:.2g} as the length L grows: the solution approaches its limit like "
            "a power of x, which the linearised equations do not show, so no far-field condition can be fitted. "
            "Solve on a finite domain with a far-field condition of your own from the decay you expect "
            "(for y ~ C/x: y(L) + L*y'(L) = 0), or use variables in which the far field decays faster")
