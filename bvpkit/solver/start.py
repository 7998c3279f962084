"""Where a solve starts: the mesh, states and parameters of the first iterate.

From a previous solution (carried onto the new constants), from expressions the user gave
per function, or from the problem's own guess recipes (:mod:`bvpkit.reduce.guess`); a default guess
that leaves the domain of the equations (``sqrt``, ``log``, fractional powers of the states)
is lifted to the positive side or replaced by the solution of the linearised problem of
continuation; then each problem class may start its own way (an eigenvalue problem from
its eigenvalue guess). Every solve, from scratch or from a previous solution, lets each
class begin on the first iterate's states (the branch of the algebraic unknowns). ``solve``, the classes' loops around it and ``solve_at``
(continuation) all start here (:mod:`bvpkit.solver.driver`).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from ..errors import OptionError
from ..language.options import SolveOptions
from ..methods.base import Trial
from ..reduce import guess as _guess
from ..methods.features import seeded
from ..reduce.mapping import Start, carried
from ..reduce.prepared import Prepared
from . import homotopy
from .solution import Solution


def check_guess(prepared: Prepared, guess: Any) -> None:
    """Refuse a guess that is neither a mapping of expressions nor a solution with the same states."""
    if guess is None or isinstance(guess, Mapping):
        return
    if isinstance(guess, Solution | Start):
        layout = guess.interpolant.layout if isinstance(guess, Solution) else guess.layout
        if layout.row_names != prepared.layout.row_names:
            raise OptionError(
                f"the guess solution has states {layout.row_names}, this problem {prepared.layout.row_names}"
            )
        return
    raise OptionError(
        f"guess must be a Solution or a mapping of function name to expression, got {type(guess).__name__}"
    )


def initial(prepared: Prepared, k: np.ndarray, guess: Any, chosen: SolveOptions) -> tuple[np.ndarray, np.ndarray,
                                                                                           np.ndarray]:
    """Mesh, states and parameters to start from: ``guess`` (a solution, carried onto ``k``, or
    expressions per function) over the problem's own recipes, moved into the domain of the
    equations when needed, then each class's own start (the eigenvalue guess of an
    eigenvalue problem: :meth:`bvpkit.reduce.transform.Transform.start`). The mesh holds
    points graded into the narrow features of the equations (:mod:`bvpkit.methods.features`).

    ``chosen`` holds the solve's options (``tol`` and ``max_nodes`` are read)."""
    compiled = prepared.compiled
    nodes = min(_guess.INITIAL_NODES, chosen.max_nodes // 2)
    if isinstance(guess, Solution | Start):
        start = as_start(guess)
        p = start.p.copy()
        t = seeded(start.t.copy(), prepared.features(p, k), chosen.max_nodes // 2)
        y = carried(start, compiled, t, p, k)
        for transform in prepared.transforms:
            transform.begin(prepared, t, y, p, k, start)
        return t, y, p
    p = prepared.p0()
    t = seeded(_guess.initial_mesh(nodes), prepared.features(p, k), chosen.max_nodes // 2)
    recipes = dict(prepared.recipes)
    for name, expression in (guess or {}).items():
        recipes.update(prepared.recipes_for(name, expression))
    y = _guess.from_recipes(recipes, compiled, t, p, k)
    for transform in prepared.transforms:
        transform.begin(prepared, t, y, p, k, recipes)
    if not defined(compiled, t, y, p, k):
        own = {n for n, r in recipes.items() if r.kind == "expression"}
        y = _inside(prepared, t, y, p, k, chosen, own=own)
    for transform in prepared.transforms:
        y, p = transform.start(prepared, t, y, p, k, bool(guess))
    return t, y, p


def defined(compiled, t: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray) -> bool:  # noqa: ANN001
    """Whether the equations and their Jacobian are finite along a guess."""
    with np.errstate(all="ignore"):
        return bool(np.isfinite(compiled.rhs(t, y, p, k)).all()
                    and np.isfinite(compiled.jac(t, y, p, k)).all())


def _inside(prepared: Prepared, t: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray, chosen: SolveOptions,
            own: set) -> np.ndarray:
    """A default guess moved into the domain of the equations (``sqrt``, ``log``, fractional
    powers of the states), when the conditions allow it: first lifted to the positive side
    by a bump that leaves every value and slope at the ends as it was (so conditions on them
    still hold), then the solution of the linearised problem of continuation
    (:func:`bvpkit.reduce.form.path_form` at ``s = 0``); the guess as it was when neither is
    defined everywhere. Functions with a guess of their own are left alone."""
    compiled = prepared.compiled
    layout = compiled.layout
    with np.errstate(all="ignore"):
        maps = np.asarray(compiled.maps(p, k), float)
    recipes = prepared.recipes
    # per function left to the default: is its value fixed by a condition somewhere?
    free = {name: any(j == 0 for terms in recipes[name].conditions for _, j in terms)
            for name, _ in layout.functions if name not in own and name in recipes}
    if not free:
        return y
    for size in (0.1, 1.0):
        lifted = _guess.lifted(y, layout, t, maps, free, size)
        if defined(compiled, t, lifted, p, k):
            return lifted
    try:
        linear = homotopy.linearised(prepared, Trial(compiled, t, y, p, k, max(chosen.tol, 1e-3),
                                                     chosen.max_nodes, False))
    except Exception:  # noqa: BLE001 - no linearised problem here: the guess as it was
        return y
    if linear is not None and defined(compiled, t, linear, p, k):
        return linear
    return y


def as_start(guess: Any) -> Start:
    """A previous solution (or a start) as a :class:`~bvpkit.reduce.mapping.Start`."""
    if isinstance(guess, Start):
        return guess
    view = guess.interpolant
    return Start(view.compiled, view.t, view.y, view.p, view.k)
