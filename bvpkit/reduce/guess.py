"""Initial meshes and guesses, in the standard form's variable ``t`` on ``[0, 1]``.

Per unknown function, in order of preference: a guess passed to ``solve``, the problem's
own guess expression, or a default: the lowest-degree polynomial (in the user's variable,
over the whole domain) that satisfies the function's linear conditions, at the ends and at
interfaces (so ``y(0) = 0, y(1) = 1`` gives ``y = x``, and ``f(0) = f'(0) = 0, f'(L) = 1``
gives ``f = x**2 / (2 L)``). On a domain infinite at both ends the polynomial is one of
``s = tanh(x / w)`` (``w`` an eighth of the truncated domain), which levels off towards
both ends: ``u(-inf) = 1, u(0) = 1/2, u(inf) = 0`` gives the front ``(1 - tanh(x / w)) / 2``
rather than a straight line through the far ends. Each guess is a :class:`GuessRecipe`:
plain data made once with SymPy (``prepared.py``), then evaluated on any mesh and for any constants without it.
Added states (integrals) start from the running integrals of their integrands (the map
between t and the user's variable is in :mod:`bvpkit.reduce.mapping`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import ProblemError
from ..programs.compiled import quantity_function
from .mapping import physical, positions

#: Nodes of the first mesh; collocation refines it where the residual asks.
INITIAL_NODES = 41


def initial_mesh(nodes: int = INITIAL_NODES) -> np.ndarray:
    """The first mesh of the standard variable ``t`` on ``[0, 1]``."""
    return np.linspace(0.0, 1.0, nodes)


@dataclass
class GuessRecipe:
    """How to guess one unknown function on any mesh, as plain data (no SymPy).

    ``kind`` is ``"expression"`` (``program`` computes the function and its derivatives from
    ``(x, p, k)``), ``"polynomial"`` (the lowest-degree polynomial meeting the linear
    conditions on the function alone: ``conditions`` lists each one's ``(point, derivative)``
    terms, and ``program`` computes their coefficients and constants from ``(p, k)``) or
    ``"levelled"`` (the same, a polynomial of ``tanh(x / w)``: a domain infinite at both ends).
    Programs are plain data (:mod:`bvpkit.programs.program`).
    """

    name: str
    order: int
    kind: str
    program: dict | None = None
    conditions: list = field(default_factory=list)

    def __call__(self, x: np.ndarray, points: np.ndarray, p: np.ndarray, k: np.ndarray) -> np.ndarray:
        """The function and its derivatives up to ``order - 1`` at ``x``: ``(order, len(x))``.

        ``points`` are the ends and interfaces in the user's variable."""
        if self.kind == "expression":
            with np.errstate(all="ignore"):
                return np.broadcast_to(quantity_function(self.program)(x, p, k), (self.order, x.size)).astype(float)
        if not self.conditions:
            return np.zeros((self.order, x.size))
        with np.errstate(all="ignore"):
            values = iter(quantity_function(self.program)(np.zeros(1), p, k)[:, 0])
        rows, rhs = [], []
        for terms in self.conditions:
            row: dict = {}
            for point, j in terms:
                where = (float(points[point]), j)
                row[where] = row.get(where, 0.0) + float(next(values))
            constant = float(next(values))
            if all(math.isfinite(v) for v in row.values()) and math.isfinite(constant):
                rows.append(row)
                rhs.append(-constant)
        if self.kind == "levelled":
            found = _fit_levelled(rows, rhs, self.order, x, float(points[0]), float(points[-1]))
            if found is not None:
                return found
        return _fit(rows, rhs, self.order, x, float(points[0]), float(points[-1]))

    def plain(self) -> dict[str, Any]:
        return {"name": self.name, "order": self.order, "kind": self.kind, "program": self.program,
                "conditions": [[list(t) for t in terms] for terms in self.conditions]}

    @classmethod
    def from_plain(cls, data: Mapping[str, Any]) -> GuessRecipe:
        return cls(str(data["name"]), int(data["order"]), str(data["kind"]), data["program"],
                   [[(int(point), int(j)) for point, j in terms] for terms in data["conditions"]])


# -- recipes (made with SymPy, once per problem) --------------------------------------------
def guess_recipes(problem, form) -> dict[str, GuessRecipe]:  # noqa: ANN001 - Problem, StandardForm
    """The recipe of every unknown's default guess: its own guess expression, else the polynomial."""
    recipes = {}
    index = None
    for name, order in form.functions:
        if name in problem.guess:
            recipes[name] = expression_recipe(problem, form, name, problem.guess[name])
        else:
            index = index or _condition_index(form)  # once per problem, not once per function
            recipes[name] = _polynomial_recipe(form, name, order, index)
    return recipes


def _condition_index(form) -> tuple[dict, dict]:  # noqa: ANN001 - StandardForm
    """The point-value symbols ``{symbol: (state, point)}`` and, per unknown function, the
    conditions whose point values are all of that function, with the symbols they use."""
    import sympy as sp

    if not form.point_conditions:
        return {}, {}
    conditions, symbols = form.point_conditions
    what = {sp.Symbol(s, real=True): (state, point) for s, state, point, _ in symbols}
    owner = {s: form.states[state][0] for s, (state, _) in what.items()}
    by_name: dict[str, list] = {}
    for c in conditions:
        used = c.free_symbols & what.keys()
        names = {owner[s] for s in used}
        if len(names) == 1:
            by_name.setdefault(names.pop(), []).append((c, used))
    return what, by_name


def expression_recipe(problem, form, name: str, e: Any) -> GuessRecipe:  # noqa: ANN001
    """A guess expression of the user's variable (and constants, parameters) as a recipe."""
    import sympy as sp

    from ..programs.codegen import X, compile_expressions, derivative

    names = {problem.x: X}
    names.update({sp.Symbol(c): form.k[i] for i, c in enumerate(form.constants) if c in problem.constants})
    names.update({sp.Symbol(q): form.p[i] for i, q in enumerate(form.parameters)})
    if not isinstance(e, sp.Basic):  # parsed by Problem (expr.parse); text never reaches SymPy here
        raise TypeError(f"a guess expression must be parsed first, got {type(e).__name__}")
    e = e.xreplace(names)
    order = dict(form.functions)[name]
    derivatives = [e]
    for _ in range(order - 1):
        derivatives.append(derivative(derivatives[-1], X))
    f = compile_expressions(derivatives, [("x", [X]), ("p", form.p), ("k", form.k)], mesh="x")
    return GuessRecipe(name, order, "expression", f.program)


def _polynomial_recipe(form, name: str, order: int, index: tuple | None = None) -> GuessRecipe:  # noqa: ANN001
    """Lowest-degree polynomial meeting the linear conditions that involve ``name`` alone
    (``index``: :func:`_condition_index` of the form, made once per problem)."""
    import sympy as sp

    from ..programs.codegen import X, compile_expressions

    if not form.point_conditions:
        return GuessRecipe(name, order, "polynomial")
    what, by_name = index if index is not None else _condition_index(form)
    terms_found, exprs = [], []
    for c, used in by_name.get(name, []):
        gradient = [(s, sp.diff(c, s)) for s in used]
        if any(g.free_symbols & set(what) for _, g in gradient):
            continue  # nonlinear in the point values
        terms_found.append([(what[s][1], form.states[what[s][0]][1]) for s, _ in gradient])
        exprs += [sp.Float(1) * g for _, g in gradient] + [sp.S.Zero + c.xreplace({s: 0 for s in used})]
    if not terms_found:
        return GuessRecipe(name, order, "polynomial")
    f = compile_expressions(exprs, [("x", [X]), ("p", form.p), ("k", form.k)], mesh="x")
    kind = "levelled" if form.points[0] == -sp.oo and form.points[-1] == sp.oo else "polynomial"
    return GuessRecipe(name, order, kind, f.program, terms_found)


def _fit(rows: list[dict], rhs: list[float], order: int, x: np.ndarray, a: float, b: float) -> np.ndarray:
    """The lowest-degree polynomial meeting ``rows`` (``{(point, derivative): coefficient}``
    = ``rhs``), and its derivatives up to ``order - 1`` at ``x``."""
    if not rows:
        return np.zeros((order, x.size))
    degree = max(len(rows) - 1, 0)
    scale = (b - a) or 1.0

    def basis(point: float, j: int) -> np.ndarray:
        s = (point - a) / scale
        out = np.zeros(degree + 1)
        for i in range(j, degree + 1):
            out[i] = math.perm(i, j) * s ** (i - j) / scale**j
        return out

    matrix = np.array([sum(g * basis(end, j) for (end, j), g in row.items()) for row in rows])
    coefficients = np.linalg.lstsq(matrix, np.array(rhs), rcond=None)[0]
    s = (x - a) / scale
    values = np.array([
        sum(coefficients[i] * (math.perm(i, j) * s ** (i - j) / scale**j if i >= j else 0.0 * s)
            for i in range(degree + 1))
        for j in range(order)
    ])
    # round-off below the values' own size is set to zero: u(s) = 0 must not come out as
    # -4e-16, outside the domain of u**1.5 or sqrt(u)
    size = np.max(np.abs(values), axis=1, keepdims=True) if values.size else 0.0
    return np.where(np.abs(values) <= 64 * np.finfo(float).eps * size, 0.0, values)


#: The levelled guess of a domain infinite at both ends uses ``tanh(x / w)`` with ``w`` this
#: part of the truncated domain: it has levelled off to within 1e-3 at the truncation points.
_LEVEL_WIDTH = 1.0 / 8


def _fit_levelled(rows: list[dict], rhs: list[float], order: int, x: np.ndarray, a: float,
                  b: float) -> np.ndarray | None:
    """The lowest-degree polynomial of ``s = tanh((x - m) / w)`` (``m`` the middle of
    ``[a, b]``, ``w`` a part of its length) meeting ``rows`` as :func:`_fit` does, and its
    derivatives in ``x`` up to ``order - 1`` at ``x``; None when the conditions ask what such a
    function cannot give (a slope other than zero far out)."""
    if not rows:
        return np.zeros((order, x.size))
    width = _LEVEL_WIDTH * (b - a)
    if not (math.isfinite(width) and width > 0):
        return None
    middle = 0.5 * (a + b)
    degree = max(len(rows) - 1, 0)
    top = max(order, 1 + max(j for row in rows for _, j in row))
    # d/dx of a polynomial P(s) is (1 - s**2) P'(s) / w: each basis function s**i and its
    # derivatives in x, as polynomials of s
    ladder = []
    for i in range(degree + 1):
        polys = [np.polynomial.Polynomial([0.0] * i + [1.0])]
        for _ in range(top - 1):
            polys.append(np.polynomial.Polynomial([1.0, 0.0, -1.0]) * polys[-1].deriv() / width)
        ladder.append(polys)

    def s_of(points: np.ndarray) -> np.ndarray:
        return np.tanh((np.asarray(points, float) - middle) / width)

    matrix = np.array([[sum(g * ladder[i][j](s_of(end)) for (end, j), g in row.items()) for i in range(degree + 1)]
                       for row in rows])
    target = np.array(rhs, float)
    coefficients = np.linalg.lstsq(matrix, target, rcond=None)[0]
    miss = float(np.max(np.abs(matrix @ coefficients - target)))
    size = 1.0 + float(np.max(np.abs(target)))
    if not (np.isfinite(coefficients).all() and miss <= 1e-6 * size
            and float(np.max(np.abs(coefficients))) <= 1e3 * size):
        return None
    s = s_of(x)
    values = np.array([sum(c * ladder[i][j](s) for i, c in enumerate(coefficients)) for j in range(order)])
    scale = np.max(np.abs(values), axis=1, keepdims=True) if values.size else 0.0
    return np.where(np.abs(values) <= 64 * np.finfo(float).eps * scale, 0.0, values)


# -- guesses on a mesh (no SymPy) --------------------------------------------------------------
def from_recipes(recipes: Mapping[str, GuessRecipe], compiled, t: np.ndarray, p: np.ndarray,  # noqa: ANN001
                 k: np.ndarray) -> np.ndarray:
    """The states ``Y`` on the standard mesh ``t`` from the user functions' recipes, the added
    states from their integrands."""
    layout = compiled.layout
    maps = np.asarray(compiled.maps(p, k), float)
    points = positions(maps)
    x = physical(t, maps, layout.stretch)
    size = layout.region_size
    y = np.zeros((layout.n, t.size))
    for name, _ in layout.functions:
        recipe = recipes[name]
        values = recipe(x.ravel(), points, p, k).reshape(recipe.order, layout.regions, t.size)
        for j in range(recipe.order):
            i = layout.index(name, j)
            for r in range(layout.regions):
                # the recipe gives d^j f / dx^j; states hold them in the user's variable
                y[r * size + i] = values[j, r]
    fill_integrals(compiled, t, y, p, k)
    if not np.isfinite(y).all():
        bad = np.argwhere(~np.isfinite(y))[0]
        r, i = divmod(int(bad[0]), size)
        raise ProblemError(
            f"the guess for {layout.state_names[i]} is NaN or inf at {layout.independent} = "
            f"{x[r, bad[1]]:.6g}; give a guess defined on the whole domain"
        )
    return y


def lifted(y: np.ndarray, layout, t: np.ndarray, maps: np.ndarray, names: dict,  # noqa: ANN001
           size: float) -> np.ndarray:
    """``y`` with the functions ``names`` raised by ``size (1 + max |f|)``: a function whose
    value is not fixed by any condition (``names[f]`` False) by that constant, the others by
    that times the bump ``16 s**2 (1 - s)**2`` (``s`` from 0 to 1 over the domain; its
    derivatives in the derivative states), which leaves the values and slopes at the ends,
    and so the conditions on them, as they were. A guess at zero moves to the positive side
    of ``sqrt`` or ``log``."""
    x = physical(t, maps, layout.stretch)
    a, b = float(positions(maps)[0]), float(positions(maps)[-1])
    span = (b - a) or 1.0
    s = (x - a) / span
    # the bump and its derivatives in x: 16 (s^2 - 2 s^3 + s^4) / span^j
    bump = [16 * (s**2 - 2 * s**3 + s**4), 16 * (2 * s - 6 * s**2 + 4 * s**3) / span,
            16 * (2 - 12 * s + 12 * s**2) / span**2, 16 * (-12 + 24 * s) / span**3,
            np.full_like(s, 384 / span**4)]
    out = y.copy()
    size_of = len(layout.states)
    for name, fixed in names.items():
        order = layout.order(name)
        value_rows = [r * size_of + layout.index(name, 0) for r in range(layout.regions)]
        height = size * (1.0 + float(np.max(np.abs(y[value_rows]))))
        if not fixed:
            out[value_rows] += height
            continue
        for j in range(min(order, len(bump))):
            for r in range(layout.regions):
                out[r * size_of + layout.index(name, j)] += height * bump[j][r]
    return out


def fill_integrals(compiled, t: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray) -> None:  # noqa: ANN001
    """Set the added states to the running integrals of their integrands (in place), carried
    on from region to region."""
    layout = compiled.layout
    size = layout.region_size
    if size == layout.users:
        return
    with np.errstate(all="ignore"):
        slopes = compiled.rhs(t, y, p, k)
    carried = np.zeros(size - layout.users)
    for r in range(layout.regions):
        rows = slice(r * size + layout.users, (r + 1) * size)
        steps = 0.5 * (slopes[rows, 1:] + slopes[rows, :-1]) * np.diff(t)
        y[rows] = carried[:, None] + np.concatenate([np.zeros((steps.shape[0], 1)), np.cumsum(steps, axis=1)], axis=1)
        carried = y[rows, -1].copy()
