"""Continuation from an easy problem to the user's: the selector's fallback when the methods
fail from the default guess, and its diagnosis of a value with no solution near it.

Three paths, each a one-parameter family of problems that ends at the user's:

* **nonlinear terms scaled** (``_homotopy`` from 0 to 1, :func:`bvpkit.reduce.form.path_form`):
  at 0 the problem is linear (its nonlinear terms replaced by their tangent at a constant
  state) and one Newton step solves it;
* **a small constant multiplying the highest derivative** (``eps y'' + ...``), continued
  down from ``_EASY``, where a layer is a few mesh intervals wide, in geometric steps;
* **the domain grown** (``_reach`` from a domain of unit length to the whole): a far-field
  condition (``f'(L) = 1``, or an infinite end) is easy to meet on a short domain.

A user may name the constant to continue in (``homotopy = "eps"``): from ``_EASY`` down for a
small constant multiplying the highest derivative, else from 0 to its value.

Each path is followed by natural continuation with step control: collocation at a loose
tolerance (``_PATH_TOL``; the intermediate solutions only start Newton's method at the next
value), from a secant prediction, the step doubled after an easy solve and halved after a
failure. When the steps fail to advance (the path turns back at a fold), the pseudo-arclength
machinery of :func:`bvpkit.families.continuation.trace` follows it around the turn, so a turn is not a
failure. The last solution of the path starts the user's problem, solved by collocation at
the tolerance asked, with its error estimate: the path only supplies a guess.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import ProblemError
from ..language.budget import preparation
from ..methods.base import Outcome, Trial
from ..methods.collocation import Collocation
from ..methods.diagnostics import hermite
from ..reduce import guess as _guess
from ..status import Status

#: Tolerance of the solves along a path: they start Newton's method at the next value, so a
#: coarse mesh is enough; the user's problem at the end is solved at the tolerance asked.
_PATH_TOL = 1e-3
#: A constant multiplying a highest derivative counts as small below this (relative to one).
_SMALL = 0.05
#: Where the continuation of a small constant starts: a layer of width 0.1 (or sqrt 0.1) of a
#: unit domain is resolved by the first mesh of 41 nodes.
_EASY = 0.1
#: First step: a quarter of the way (geometric paths: a factor of 4 per step at most).
_FIRST_FRACTION = 0.25
_GROW, _SHRINK = 2.0, 0.5
#: Smallest step, as a fraction of the whole path, before the turn is handed to trace().
_MIN_FRACTION = 1.0 / 128
#: Length (in the user's variable) of the short domain the growing path starts from.
_SHORT = 1.0
#: The probe for a value without a solution traces each constant from this fraction of its value.
_PROBE_FROM = 0.1
_PROBE_POINTS = 150  # a trace that stops at this count proves nothing (the message needs an ended trace)
#: Traces inside a solve draw nothing: a coarse bound on the drawn angle (trace's default is 8 degrees).
_PATH_ANGLE = math.radians(30.0)
_TRACE_SOLVES = 10  # a solve inside a trace gets this part of the time left
#: A step of a path gives up after Newton fails on this many meshes (a shorter step follows).
_PATIENCE = 2
_PROBES = 3  # constants probed at most


@dataclass
class Path:
    """One family of problems from an easy one to the user's.

    Attributes
    ----------
    name : str
        The constant continued (``_homotopy``, ``_reach`` or a user's constant).
    start, stop : float
    geometric : bool
        Steps by factors (a small constant going down by decades) rather than differences.
    words : str
        What the path is, for the attempts and the selection line.
    own : bool
        The constant is one of the path form's (:func:`bvpkit.reduce.form.path_form`), not the user's.
    """

    name: str
    start: float
    stop: float
    geometric: bool
    words: str
    own: bool = False


# -- what the problem offers -------------------------------------------------------------------
@dataclass
class Facts:
    """What the symbolic problem says about the paths it allows (worked out once per problem)."""
    small: dict  # user constant -> value, for small constants multiplying a highest derivative
    far_field: bool  # a condition at the right end on derivatives only, or an infinite end
    reach: bool  # a single region with a fixed finite left end: the domain can grow
    nonlinear: bool


_FACTS: dict[str, Facts] = {}
_SYSTEMS: dict[str, Any] = {}


def facts(prepared, deadline: float | None = None) -> Facts:  # noqa: ANN001 - a Prepared
    """The paths ``prepared`` allows (SymPy's work, once per problem; within the preparation's
    cap and ``deadline``, see :func:`bvpkit.language.budget.preparation`)."""
    key = prepared.facts["key"] + repr(sorted(prepared.constants.items()))
    found = _FACTS.get(key)
    if found is None:
        with preparation("working out the continuation's paths", deadline=deadline):
            found = _facts(prepared)
        if len(_FACTS) > 200:
            _FACTS.clear()
        _FACTS[key] = found
    return found


def _facts(prepared) -> Facts:  # noqa: ANN001
    import sympy as sp

    from ..reduce.form import standard_form

    problem = prepared.problem()
    form = standard_form(problem)
    small = {}
    x = problem.x
    candidates = {sp.Symbol(name) for name, value in problem.constants.items() if 0 < abs(value) < _SMALL}
    # only an equation holding a small constant, and only its own highest derivatives (not
    # every equation by every unknown's: 90,000 derivatives for a chain of 300 equations)
    for eq in (e for e in problem.equations if candidates and e.free_symbols & candidates):
        present = eq.atoms(sp.Derivative)
        for name in problem.unknowns:
            top = sp.Derivative(sp.Function(name)(x), (x, problem.orders[name]))
            if top not in present:
                continue
            coefficient = sp.diff(eq, top)
            for symbol in coefficient.free_symbols & candidates:
                if sp.simplify(coefficient.xreplace({symbol: 0})) == 0:
                    small[symbol.name] = float(problem.constants[symbol.name])
    right = set(form.yb)
    value_rows = {i for i, (_, order) in enumerate(form.states) if order == 0}
    ends = [0.0, 1.0]
    for transform in prepared.transforms:
        ends = transform.ends(ends)
    far = math.isinf(ends[-1])
    for c in form.conditions:
        used = c.free_symbols & right
        if used and not any(form.yb[i] in used for i in value_rows) and not c.free_symbols & set(form.ya):
            far = True
    states = set(form.y)
    nonlinear = any(sp.diff(f, v).free_symbols & states for f in form.rhs for v in f.free_symbols & states)
    a = form.points[0]
    reach = form.regions == 1 and a not in (sp.oo, -sp.oo) and not a.free_symbols & set(form.p)
    return Facts(small, far, reach, nonlinear)


def paths(prepared, named: str | None, trial: Trial) -> list[Path]:  # noqa: ANN001
    """The paths to try, in order: the one named, else a small constant of the highest
    derivative, the nonlinear terms scaled, the domain grown (those the problem allows)."""
    found = facts(prepared, trial.deadline)
    if named:
        value = float(prepared.constants[named])
        if named in found.small:
            return [_small_path(named, value)]
        return [Path(named, 0.0, value, False, f"{named} continued from 0 to {value:g}")]
    result = [_small_path(name, value) for name, value in found.small.items()]
    if found.nonlinear:
        result.append(Path("_homotopy", 0.0, 1.0, False, "the nonlinear terms scaled by s from 0 to 1",
                           own=True))
    if found.far_field and found.reach:
        length = _length(trial)
        if length > 2 * _SHORT:
            power = trial.compiled.layout.power(0)
            start = (_SHORT / length) ** (1.0 / power)
            result.append(Path("_reach", start, 1.0, True, f"the domain grown from a length of {_SHORT:g} to "
                               f"{length:.4g}", own=True))
    return result


def _small_path(name: str, value: float) -> Path:
    start = math.copysign(_EASY, value)
    return Path(name, start, value, True, f"{name} continued down from {start:g} to {value:g}")


def _length(trial: Trial) -> float:
    with np.errstate(all="ignore"):
        maps = np.asarray(trial.compiled.maps(trial.p, trial.k), float)
    return float(abs(maps[0, 1]))


# -- the path form -------------------------------------------------------------------------
def _system(prepared, deadline: float | None = None):  # noqa: ANN001, ANN202
    """The compiled path form of ``prepared`` (code generated once per problem structure,
    within the preparation's cap and ``deadline``)."""
    key = prepared.layout.key
    found = _SYSTEMS.get(key)
    if found is None:
        from ..programs.codegen import compile_system
        from ..reduce.form import path_form, standard_form

        with preparation("preparing the linearised problem of the continuation", deadline=deadline):
            found = compile_system(path_form(standard_form(prepared.problem())))
        if len(_SYSTEMS) > 100:
            _SYSTEMS.clear()
        _SYSTEMS[key] = found
    return found


def _anchors(system, trial: Trial, k: np.ndarray) -> np.ndarray | None:  # noqa: ANN001
    """The constant state the nonlinear terms are linearised about: zero where the equations
    and their Jacobian are finite there, else the mean of the guess; None when neither is."""
    n = trial.compiled.n
    x = trial.x
    for anchor in (np.zeros(n), np.mean(trial.y, axis=1)):
        kk = np.concatenate([k, [0.0, 1.0], anchor])
        with np.errstate(all="ignore"):
            y = np.repeat(anchor[:, None], x.size, axis=1)
            ok = (np.isfinite(system.rhs(x, y, trial.p, kk)).all()
                  and np.isfinite(system.jac(x, y, trial.p, kk)).all()
                  and np.isfinite(system.bc(anchor, anchor, trial.p, kk)).all())
        if ok:
            return anchor
    return None


def linearised(prepared, trial: Trial) -> np.ndarray | None:  # noqa: ANN001
    """The solution of the problem with its nonlinear terms linearised about a constant state
    (the path form at ``s = 0``) on ``trial``'s mesh, or None: a start inside the domain of
    the equations when the default guess is not."""

    system = _system(prepared, trial.deadline)
    anchor = _anchors(system, trial, trial.k)
    if anchor is None:
        return None
    k = np.concatenate([trial.k, [0.0, 1.0], anchor])
    result = Collocation().solve(dataclasses.replace(trial, compiled=system, k=k, verify=False))
    if not result.ok:
        return None

    return hermite(system, result.x, result.y, result.p, k)(trial.x)


# -- following a path ----------------------------------------------------------------------
def follow(prepared, path: Path, trial: Trial, trace=None) -> tuple[Outcome, str]:  # noqa: ANN001
    """Follow ``path`` to the user's problem and solve it from there (a turn on the way taken
    by ``trace``, the path follower, when one is given).

    Returns the outcome of the final solve (collocation at ``trial.tol``, with its estimate;
    a failure says where the path stopped) and how it got there, in words (the problems
    solved on the way, a turn taken by pseudo-arclength).
    """

    method = Collocation()
    if path.own:
        try:
            system = _system(prepared, trial.deadline)
        except ProblemError as err:  # its preparation ran past its cap or the time limit
            return _stopped(trial, err.one_line()), "no solve"
        anchor = _anchors(system, trial, trial.k)
        if anchor is None:
            why = "the linearised problem is not defined at any constant state tried"
            return _stopped(trial, why), "no solve"
        index = len(trial.k) + (0 if path.name == "_homotopy" else 1)
        base = np.concatenate([trial.k, [1.0, 1.0], anchor])
    else:
        system = trial.compiled
        index = trial.compiled.layout.constants.index(path.name)
        base = np.array(trial.k, float)

    def at(value: float) -> np.ndarray:
        k = base.copy()
        k[index] = value
        return k

    def solve(value: float, x, y, p, tol: float = _PATH_TOL) -> Outcome:  # noqa: ANN001
        return method.solve(dataclasses.replace(trial, compiled=system, x=x, y=y, p=p, k=at(value),
                                                tol=max(tol, trial.tol), verify=False, patience=_PATIENCE))

    guess = _fresh(prepared, system, trial, at(path.start))
    first = solve(path.start, *guess)
    if not first.ok:
        why = f"the easiest problem of the path ({path.words}) did not solve: {first.message}"
        return _stopped(trial, why), "1 solve"
    value, last, previous, count, around = path.start, first, None, 1, ""
    step = _FIRST_FRACTION
    while value != path.stop:
        if trial.out_of_time():
            return _stopped(trial, f"the time budget ran out at {_shown(path, value)}"), f"{count} solves"
        target = _advance(path, value, step)
        x, y, p = _predict(system, last, previous, value, target, path, at)
        result = solve(target, x, y, p)
        count += 1
        if result.ok:
            previous, last, value = (last, value), result, target
            step = min(1.0, step * (_GROW if result.iterations <= 6 else 1.0))
            continue
        step *= _SHRINK
        if step < _MIN_FRACTION:
            turned = _around(prepared, path, trial, system, at, value, trace)
            if turned is None:
                # the last step's own failure says most (a layer the mesh limit cannot resolve)
                stopped = _stopped(trial, f"the path stopped at {_shown(path, value)}: shorter and shorter "
                                          "steps beyond it failed, and no way round a turn was found; the "
                                          f"last step: {result.message}")
                if result.status is Status.MESH_LIMIT:
                    stopped.status = Status.MESH_LIMIT
                return stopped, f"{count} solves"
            around = f", then around a turn at {_shown(path, value)} by pseudo-arclength"
            last, value = turned, path.stop
            break
    final = method.solve(dataclasses.replace(trial, x=last.x, y=last.y, p=last.p, patience=None))
    return final, f"{count + 1} solves{around}"


def _fresh(prepared, system, trial: Trial, k: np.ndarray):  # noqa: ANN001, ANN202
    """The default guess for the first problem of a path (its own domain, for a grown one)."""
    if system is trial.compiled:
        return trial.x, trial.y, trial.p
    try:
        y = _guess.from_recipes(prepared.recipes, system, trial.x, trial.p, k)
    except Exception:  # noqa: BLE001 - a guess that cannot be formed here: the trial's own
        return trial.x, trial.y, trial.p
    return trial.x, y, trial.p


def _advance(path: Path, value: float, step: float) -> float:
    """The next value: ``step`` of the whole way (geometric: of the way in logarithms)."""
    if path.geometric:
        ratio = path.stop / path.start
        target = value * ratio**step
        return path.stop if (target - path.stop) * math.copysign(1.0, ratio - 1.0) >= 0 else target
    target = value + step * (path.stop - path.start)
    return path.stop if (target - path.stop) * math.copysign(1.0, path.stop - path.start) >= 0 else target


def _predict(system, last: Outcome, previous, value: float, target: float, path: Path,  # noqa: ANN001, ANN202
             at):
    """A secant prediction of the solution at ``target`` from the last two, on the last mesh."""
    if previous is None or path.geometric and path.name == "_reach":
        return last.x, last.y, last.p

    before, where = previous
    span = value - where
    if span == 0:
        return last.x, last.y, last.p
    ratio = (target - value) / span
    with np.errstate(all="ignore"):
        y_before = hermite(system, before.x, before.y, before.p, at(where))(last.x)
    if not np.isfinite(y_before).all():
        return last.x, last.y, last.p
    y = last.y + ratio * (last.y - y_before)
    p = last.p + ratio * (last.p - before.p)
    with np.errstate(all="ignore"):
        if not np.isfinite(system.rhs(last.x, y, p, at(target))).all():
            return last.x, last.y, last.p  # the prediction left the equations' domain
    return last.x, y, p


def _around(prepared, path: Path, trial: Trial, system, at, value: float,  # noqa: ANN001
            trace=None) -> Outcome | None:  # noqa: ANN001
    """The path around a turn, by pseudo-arclength continuation (``trace``, the path follower
    the selector was given) from its start; the solution at its end, or None."""
    if trace is None or prepared.truncated or trial.out_of_time():
        return None
    traced = _traceable(prepared, path, system, trial, at)
    try:
        branch = trace(traced, path.name, start=path.start, stop=path.stop, method="collocation",
                       tol=_PATH_TOL, verify=False, max_points=_PROBE_POINTS, max_angle=_PATH_ANGLE)
    except Exception:  # noqa: BLE001 - a trace that cannot run here leaves the path stopped
        return None
    slack = 1e-9 * max(1.0, abs(path.stop))
    reached = bool(branch.solutions) and abs(branch.parameter[-1] - path.stop) <= slack
    if not (branch.success and reached):
        return None
    view = branch.solutions[-1].interpolant
    return Outcome(Status.SOLVED, "", view.t, view.y, view.p)


def _traceable(prepared, path: Path, system, trial: Trial, at):  # noqa: ANN001, ANN202
    """``prepared`` (or its path form) as a prepared problem ``trace`` can take: continuation
    inside it switched off, each solve bounded by what is left of the budget."""
    left = max(0.1, (trial.deadline - time.perf_counter()) if trial.deadline is not None else 5.0)
    settings = {"homotopy": "off", "time_limit": max(0.1, left / _TRACE_SOLVES), "method": "collocation"}
    facts_ = {**prepared.facts, "settings": settings, "outputs": {}}
    if not path.own:
        return dataclasses.replace(prepared, facts=facts_)
    k = at(path.start)
    names = system.layout.constants
    own = {name for transform in prepared.transforms for name in transform.constants(None)}  # the classes' own
    constants = {**prepared.constants, **{name: float(k[i]) for i, name in enumerate(names)
                                         if name.startswith("_") and name not in own}}
    plain = {"programs": list(system.programs), "pattern": system.jac_pattern.tolist(),
             "sides": system.bc_sides.tolist()}
    return dataclasses.replace(prepared, facts=facts_, layout=system.layout, system=plain,
                               constants=constants, quantities={})


def _shown(path: Path, value: float) -> str:
    if path.name == "_homotopy":
        return f"s = {value:.3g} of the nonlinear terms"
    if path.name == "_reach":
        return f"{value:.3g} of the domain"
    return f"{path.name} = {value:.4g}"


def _stopped(trial: Trial, why: str) -> Outcome:
    return Outcome(Status.NOT_CONVERGED, f"the continuation did not reach the problem asked: {why}",
                   np.asarray(trial.x, float), np.asarray(trial.y, float), np.asarray(trial.p, float))


# -- a value with no solution near it -------------------------------------------------------
def no_solution(prepared, trial: Trial, trace=None) -> str:  # noqa: ANN001
    """Words saying that the problem may have no solution at the constants' values, from a
    fold seen along a quick trace of a constant towards its value ('' when none is seen).

    Each constant that the equations depend on along the guess (not a small constant of the
    highest derivative: there a failure is a layer) is traced from ``_PROBE_FROM`` of its
    value towards it; a fold passed on the way, with the trace never reaching the value,
    says that the solutions turn back before it. Nothing is said without ``trace``.
    """
    if trace is None:
        return ""
    found = facts(prepared, trial.deadline)
    layout = trial.compiled.layout
    with np.errstate(all="ignore"):
        kjac = np.asarray(trial.compiled.kjac(trial.x, trial.y, trial.p, trial.k))
    probed = 0
    for name, value in prepared.constants.items():
        if probed >= _PROBES or trial.out_of_time():
            break
        if name in found.small or value == 0 or name not in layout.constants:
            continue
        if not np.any(np.abs(kjac[:, layout.constants.index(name)]) > 0):
            continue
        probed += 1
        traced = _traceable(prepared, Path(name, 0.0, value, False, ""), trial.compiled, trial, None)
        start = _PROBE_FROM * value
        try:
            branch = trace(traced, name, start=start, stop=value, method="collocation",
                           tol=max(trial.tol, 1e-6), verify=False, max_points=_PROBE_POINTS, max_angle=_PATH_ANGLE)
        except Exception:  # noqa: BLE001 - a probe that cannot run says nothing
            continue
        reached = any(abs(v - value) <= 1e-9 * max(1.0, abs(value)) for v in branch.parameter)
        if branch.folds and not reached and len(branch.parameter) < _PROBE_POINTS:
            fold = branch.folds[0]
            beyond = "above" if value > fold.parameter else "below"
            return (f"the problem may have no solution for {name} = {value:g}: traced from {name} = "
                    f"{start:g}, the solutions turn back at a fold at {name} = {fold.parameter:.10g}, and "
                    f"none was found {beyond} it. See the family with bvpkit trace (parameter {name}, from "
                    f"{start:g} to {value:g}); a solution may exist on another branch, from another guess")
    return ""
