"""Initial meshes and guesses, in the standard form's variable ``t`` on ``[0, 1]``.

Per unknown function, in order of preference: a guess passed to ``solve``, the problem's
own guess expression, or a default: the lowest-degree polynomial (in the user's variable,
over the whole domain) that satisfies the function's linear conditions, at the ends and at
interfaces (so ``y(0) = 0, y(1) = 1`` gives ``y = x``, and ``f(0) = f'(0) = 0, f'(L) = 1``
gives ``f = x**2 / (2 L)``). Each guess is a :class:`GuessRecipe`: plain data made once
with SymPy (``prepared.py``), then evaluated on any mesh and for any constants without it.
Added states (integrals) start from the running integrals of their integrands; an
eigenvalue problem starts from a discretised matrix eigenproblem.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import ProblemError

#: Nodes of the first mesh; collocation refines it where the residual asks.
INITIAL_NODES = 41


def initial_mesh(nodes: int = INITIAL_NODES) -> np.ndarray:
    """The first mesh of the standard variable ``t`` on ``[0, 1]``."""
    return np.linspace(0.0, 1.0, nodes)


def positions(maps: np.ndarray) -> np.ndarray:
    """The ends and interfaces ``(X_0, ..., X_R)`` in the user's variable, from the region
    maps ``(c_r, h_r)`` (a truncated infinite end where it is placed now)."""
    return np.concatenate([maps[:, 0], [maps[-1, 0] + maps[-1, 1]]])


def physical(t: np.ndarray, maps: np.ndarray, stretch: tuple = ()) -> np.ndarray:
    """The user's variable of every region at the standard mesh ``t``: ``(regions, len(t))``.

    Region ``r`` covers ``x = c_r + h_r t**d_r`` (``stretch`` holds the powers ``d_r``; empty:
    all 1, the affine map of most problems)."""
    t = np.asarray(t, float)[None, :]
    powers = np.array([stretch[r] if r < len(stretch) else 1 for r in range(maps.shape[0])], float)[:, None]
    return maps[:, 0:1] + maps[:, 1:2] * (t if not len(stretch) else np.abs(t) ** powers * np.sign(t))


def standard(x: np.ndarray, c: np.ndarray, h: np.ndarray, power: np.ndarray | int = 1) -> np.ndarray:
    """The standard variable ``t`` of points ``x`` of regions with maps ``x = c + h t**power``."""
    s = (np.asarray(x, float) - c) / h
    if np.all(np.asarray(power) == 1):
        return s
    return np.sign(s) * np.abs(s) ** (1.0 / np.asarray(power, float))


#: Where a stretched map's ``dx/dt`` vanishes (``t = 0``), slopes are read this close to it:
#: ``x - a = h t**d`` is then below 1e-24 h, and the slope's limit is reached to round-off.
_NEAR_END = 1e-12


def nudged(t: np.ndarray, power: np.ndarray | int = 1) -> np.ndarray:
    """``t`` with the ends of stretched maps (``t = 0``, ``power > 1``) moved to ``_NEAR_END``,
    where ``dx/dt`` is not zero, so a slope ``(dY/dt) / (dx/dt)`` reads its limit."""
    t = np.asarray(t, float)
    return np.where((np.asarray(power) > 1) & (t < _NEAR_END), _NEAR_END, t)


def rate(t: np.ndarray, h: np.ndarray, power: np.ndarray | int = 1) -> np.ndarray:
    """``dx/dt`` of the maps ``x = c + h t**power`` at ``t`` (``h`` for an affine map)."""
    t = np.asarray(t, float)
    power = np.asarray(power, float)
    if np.all(power == 1):
        return np.broadcast_to(np.asarray(h, float), np.broadcast(t, h).shape).astype(float)
    return h * power * np.abs(t) ** (power - 1.0)


@dataclass
class GuessRecipe:
    """How to guess one unknown function on any mesh, as plain data (no SymPy).

    ``kind`` is ``"expression"`` (``program`` computes the function and its derivatives from
    ``(x, p, k)``) or ``"polynomial"`` (the lowest-degree polynomial meeting the linear
    conditions on the function alone: ``conditions`` lists each one's ``(point, derivative)``
    terms, and ``program`` computes their coefficients and constants from ``(p, k)``).
    Programs are plain data (:mod:`bvpkit.generated.program`).
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
                return np.broadcast_to(_function(self.program)(x, p, k), (self.order, x.size)).astype(float)
        if not self.conditions:
            return np.zeros((self.order, x.size))
        with np.errstate(all="ignore"):
            values = iter(_function(self.program)(np.zeros(1), p, k)[:, 0])
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
        return _fit(rows, rhs, self.order, x, float(points[0]), float(points[-1]))

    def plain(self) -> dict[str, Any]:
        return {"name": self.name, "order": self.order, "kind": self.kind, "program": self.program,
                "conditions": [[list(t) for t in terms] for terms in self.conditions]}

    @classmethod
    def from_plain(cls, data: Mapping[str, Any]) -> GuessRecipe:
        return cls(str(data["name"]), int(data["order"]), str(data["kind"]), data["program"],
                   [[(int(point), int(j)) for point, j in terms] for terms in data["conditions"]])


_FUNCTIONS: dict[str, Any] = {}


def _function(program: dict) -> Any:
    """The callable of a quantity's program (built once per program text)."""
    import json

    key = json.dumps(program, sort_keys=True)
    function = _FUNCTIONS.get(key)
    if function is None:
        from ..generated.compiled import build_quantity

        if len(_FUNCTIONS) > 4_000:
            _FUNCTIONS.clear()
        function = _FUNCTIONS[key] = build_quantity(program)
    return function


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

    from ..generated.codegen import compile_expressions, derivative
    from .form import X

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

    from ..generated.codegen import compile_expressions
    from .form import X

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
    return GuessRecipe(name, order, "polynomial", f.program, terms_found)


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


def interior_zeros(values: np.ndarray) -> int:
    """Sign changes of a sampled function, ignoring samples within round-off of zero."""
    scale = np.max(np.abs(values)) if values.size else 0.0
    signs = np.sign(values[np.abs(values) > 1e-8 * scale])
    return int(np.count_nonzero(signs[1:] != signs[:-1]))


def first_function(layout, y: np.ndarray) -> np.ndarray:  # noqa: ANN001
    """The values of the first unknown function along the whole domain, regions in order."""
    i = layout.index(layout.functions[0][0], 0)
    return np.concatenate([y[r] for r in layout.rows(i)])


def eigen_guess(compiled, t: np.ndarray, k: np.ndarray, mode: int,  # noqa: ANN001
                report: dict | None = None) -> tuple[np.ndarray, float]:
    """States ``Y`` (user rows filled) and eigenvalue of mode ``mode`` of a linear problem.

    ``report``, when given, gets ``by_order``: True when the modes found all had as many
    interior zeros, so the mode was told by the order of the eigenvalues.

    Solves the trapezoidal-rule discretisation of the standard form on a uniform mesh as a
    generalized matrix eigenproblem ``K v = lam L v`` (the equations are affine in the
    eigenvalue, so ``K`` and ``L`` come from the exact Jacobian at ``lam = 0`` and ``1``),
    and picks the eigenvector whose first unknown has ``mode - 1`` interior zeros, the
    smallest such eigenvalue in magnitude. A singular term enters through its limit at
    ``t = 0`` (the compiled Jacobian carries it).
    """
    import scipy.linalg

    layout = compiled.layout
    which = layout.eigenvalue
    users = layout.user_rows
    u = len(users)
    nodes = max(121, 30 * mode + 1)
    s = np.linspace(0.0, 1.0, nodes)
    y0 = np.zeros((layout.n, nodes))
    p0 = np.zeros(len(layout.parameters))
    p1 = p0.copy()
    p1[which] = 1.0
    with np.errstate(all="ignore"):
        A = compiled.jac(s, y0, p0, k)[np.ix_(users, users)]
        B = compiled.jac(s, y0, p1, k)[np.ix_(users, users)] - A
        ba, bb, _ = compiled.bc_jac(y0[:, 0], y0[:, -1], p0, k)
        ba1, bb1, _ = compiled.bc_jac(y0[:, 0], y0[:, -1], p1, k)
    rows = [i for i, kind in enumerate(layout.condition_kinds) if kind != "added"]
    ba_lam, bb_lam = (ba1 - ba)[np.ix_(rows, users)], (bb1 - bb)[np.ix_(rows, users)]
    ba, bb = ba[np.ix_(rows, users)], bb[np.ix_(rows, users)]
    size = u * nodes
    K = np.zeros((size, size))
    L = np.zeros((size, size))
    h = np.diff(s)
    eye = np.eye(u)
    for i in range(nodes - 1):
        r = slice(i * u, (i + 1) * u)
        c0, c1 = slice(i * u, (i + 1) * u), slice((i + 1) * u, (i + 2) * u)
        K[r, c0] = -eye / h[i] - 0.5 * A[:, :, i]
        K[r, c1] = eye / h[i] - 0.5 * A[:, :, i + 1]
        L[r, c0] = 0.5 * B[:, :, i]
        L[r, c1] = 0.5 * B[:, :, i + 1]
    last = slice((nodes - 1) * u, size)
    K[last, :u] = ba
    K[last, size - u:] = bb
    L[last, :u] = -ba_lam  # conditions affine in the eigenvalue (a column's shear condition)
    L[last, size - u:] = -bb_lam
    first_rows = [users.index(row) for row in layout.rows(layout.index(layout.functions[0][0], 0))]

    def candidates_of(values: np.ndarray, vectors: np.ndarray) -> list:
        finite = np.isfinite(values) & (np.abs(values.imag) <= 1e-6 * (1 + np.abs(values.real)))
        found = []
        for lam, v in zip(values[finite].real, vectors[:, finite].T):
            v = v.real.reshape(nodes, u).T
            along = np.concatenate([v[i] for i in first_rows])
            if np.any(along):
                found.append((interior_zeros(along), abs(lam), lam, v))
        return found

    # the few eigenvalues nearest zero by shift-invert first (a sparse LU and a few products:
    # milliseconds, where the dense QZ of all of them took 0.4 s on a 4-state problem); all of
    # them when those do not hold the mode asked for
    wanted: list = []
    candidates = _nearest_eigenpairs(K, L, 2 * mode + 6, candidates_of)
    if candidates is not None:
        wanted = [c for c in candidates if c[0] == mode - 1]
    # when every mode found has as many zeros (the deflection of a column clamped at one end
    # and free at the other keeps one sign in every mode), the order of the eigenvalues is all
    # there is to go by, and the nearest ones are the ones to order
    silent = candidates is not None and len(candidates) >= mode and len({c[0] for c in candidates}) == 1
    if not wanted and not silent:
        values, vectors = scipy.linalg.eig(K, L)
        candidates = candidates_of(values, vectors)
    if not candidates:
        raise ProblemError("the discretised eigenproblem has no real eigenvalue; check the equations and conditions")
    wanted = [c for c in candidates if c[0] == mode - 1]
    if report is not None:
        report["by_order"] = not wanted and len({c[0] for c in candidates}) == 1
    pool = sorted(wanted or candidates, key=lambda c: c[1])
    _, _, lam, v = pool[0] if wanted else pool[min(mode - 1, len(pool) - 1)]
    value_rows = [j for j, row in enumerate(users) if layout.states[row % layout.region_size][1] == 0]
    norm = np.trapezoid(np.sum(v[value_rows] ** 2, axis=0), s)
    v = v / np.sqrt(norm) if norm > 0 else v
    along = np.concatenate([v[i] for i in first_rows])
    peak = np.argmax(np.abs(along[: max(2, along.size // (2 * mode))]))
    if along[peak] < 0:
        v = -v
    y = np.zeros((layout.n, t.size))
    for j, row in enumerate(users):
        y[row] = np.interp(t, s, v[j])
    return y, float(lam)


def _nearest_eigenpairs(K: np.ndarray, L: np.ndarray, count: int, candidates_of) -> list | None:  # noqa: ANN001
    """The ``count`` eigenpairs of ``K v = lam L v`` nearest zero (shift-invert of the standard
    problem ``K^-1 L v = v / lam``: the eigenvalues at infinity of a singular ``L`` map to
    zero and stay out of the way), through ``candidates_of``; None when it does not serve
    (``K`` singular, too small, ARPACK not converged)."""
    import scipy.sparse as sparse
    from scipy.sparse.linalg import ArpackError, ArpackNoConvergence, LinearOperator, eigs, splu

    size = K.shape[0]
    if count >= size - 2:
        return None
    Ls = sparse.csr_matrix(L)
    try:
        lu = splu(sparse.csc_matrix(K))
    except RuntimeError:
        return None
    op = LinearOperator((size, size), matvec=lambda x: lu.solve(Ls @ x), dtype=float)
    try:
        nu, vectors = eigs(op, k=count, which="LM", v0=np.ones(size), tol=1e-10)
    except (ArpackError, ArpackNoConvergence, ValueError):
        return None
    with np.errstate(divide="ignore", invalid="ignore"):
        values = np.where(nu != 0, 1.0 / nu, np.inf)
    return candidates_of(values, vectors)


class Start:
    """A guess given as standard-form arrays (what continuation predicts), used like a Solution.

    Parameters
    ----------
    compiled : CompiledSystem
    t : ndarray, shape (m,)
        The standard mesh.
    y : ndarray, shape (n, m)
    p : ndarray, shape (n_p,)
    k : ndarray
        The constants it belongs to (its region maps).
    """

    def __init__(self, compiled, t: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray):  # noqa: ANN001
        self.compiled = compiled
        self.t, self.y, self.p, self.k = (np.asarray(a, float) for a in (t, y, p, k))

    @property
    def layout(self):  # noqa: ANN201
        return self.compiled.layout


def truncation_change(old: Start, new: Start) -> float:
    """How much a solution changed when infinity moved out (``new`` on the longer domain):
    the largest relative change of the states on ``old``'s mesh, and of the parameters."""
    theirs = carried(new, old.compiled, old.t, old.p, old.k)
    change = float(np.max(np.abs(old.y - theirs) / (1.0 + np.abs(theirs))))
    if old.p.size:
        change = max(change, float(np.max(np.abs(old.p - new.p) / (1.0 + np.abs(new.p)))))
    return change


def carried(start, compiled, t: np.ndarray, p: np.ndarray, k: np.ndarray,  # noqa: ANN001
            hold: bool = False) -> np.ndarray:
    """The states of a previous solution (or :class:`Start`) on the standard mesh ``t`` of a
    problem with the same layout but other constants (other region maps).

    Each region's states are read at the same points of the user's variable; beyond the
    previous solution's own interval (a longer truncation of an infinite domain) they are
    continued along their slope at the end, or held at their end values (``hold``: for
    states that decay towards a value the slope would overshoot, out of the domain of a
    fractional power).
    """
    from ..methods.diagnostics import hermite

    layout = compiled.layout
    old_maps = np.asarray(compiled.maps(start.p, start.k), float)
    new_maps = np.asarray(compiled.maps(p, k), float)
    if np.allclose(old_maps, new_maps, rtol=0, atol=0) and t.size == start.t.size and np.array_equal(t, start.t):
        return start.y.copy()
    spline = hermite(start.compiled, start.t, start.y, start.p, start.k)
    size = layout.region_size
    y = np.empty((layout.n, t.size))
    with np.errstate(all="ignore"):
        slopes = start.compiled.rhs(start.t[[0, -1]], start.y[:, [0, -1]], start.p, start.k)
    for r in range(layout.regions):
        rows = slice(r * size, (r + 1) * size)
        d = layout.power(r)
        x = new_maps[r, 0] + new_maps[r, 1] * t**d
        s = standard(x, old_maps[r, 0], old_maps[r, 1], d)
        values = spline(np.clip(s, 0.0, 1.0))[rows]
        right, left = s > 1.0, s < 0.0
        if not hold:
            values[:, right] += slopes[rows, 1:2] * (s[right] - 1.0)
            values[:, left] += slopes[rows, 0:1] * s[left]
        y[rows] = values
    return y
