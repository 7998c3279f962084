"""Initial meshes and guesses.

Per unknown function, in order of preference: a guess passed to ``solve``, the problem's
own guess expression, or a default: the lowest-degree polynomial that satisfies the
function's linear boundary conditions (so ``y(0) = 0, y(1) = 1`` gives ``y = x``, and
``f(0) = f'(0) = 0, f'(L) = 1`` gives ``f = x**2 / (2 L)``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ._lazy import LazyModule
from .compiled import CompiledSystem
from .errors import ProblemError

sp = LazyModule("sympy")

#: Nodes of the first mesh; collocation refines it where the residual asks.
INITIAL_NODES = 41


def initial_mesh(a: float, b: float, nodes: int = INITIAL_NODES) -> np.ndarray:
    return np.linspace(a, b, nodes)


def initial_guess(
    problem,  # noqa: ANN001 - a bvpkit.Problem
    compiled: CompiledSystem,
    x: np.ndarray,
    k: np.ndarray,
    override: Mapping[str, Any] | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """States ``(n, m)`` and parameters ``(n_p,)`` to start from on the mesh ``x``.

    Guesses without ``override`` are remembered per problem, mesh and constants
    (``problem._starts``); a problem rebuilt from a cache (see ``prepared.py``) brings them
    along, so its solve needs no SymPy.
    """
    layout = compiled.layout
    p = np.array([problem.unknown_parameters[q] for q in layout.parameters], dtype=float)
    remembered = problem.__dict__.setdefault("_starts", {})
    key = start_key(x, k, p)
    if not override and key in remembered:
        y, p = remembered[key]
        return np.array(y, dtype=float), np.array(p, dtype=float)
    y = np.zeros((layout.n, x.size))
    recipes = guess_recipes(problem, compiled)
    if override:
        system = compiled.system if compiled.system is not None else problem.system
        recipes = {**recipes, **{name: _expression_recipe(problem, system, name, problem._guesses({name: value})[name])
                                 for name, value in override.items()}}
    for name in problem.unknowns:
        recipe = recipes[name]
        y[[layout.index(name, j) for j in range(recipe.order)]] = recipe(x, p, k)
    fill_integrals(compiled, x, y, p, k)
    if not np.isfinite(y).all():
        bad = np.argwhere(~np.isfinite(y))[0]
        raise ProblemError(
            f"the guess for {layout.state_names[bad[0]]} is NaN or inf at "
            f"{problem.independent} = {x[bad[1]]:.6g}; give a guess defined on the whole domain"
        )
    if not override:
        if len(remembered) >= 8:
            remembered.clear()
        remembered[key] = (y.copy(), p.copy())
    return y, p


def start_key(x: np.ndarray, k: np.ndarray, p: np.ndarray) -> str:
    """Key of a remembered guess: the mesh, the constants and the parameter guesses."""
    import hashlib

    data = b"".join(np.ascontiguousarray(a, dtype=float).tobytes() for a in (x, k, p))
    return hashlib.sha256(data).hexdigest()[:24]


@dataclass
class GuessRecipe:
    """How to guess one unknown function on any mesh, as plain data (no SymPy).

    ``kind`` is ``"expression"`` (``program`` computes the function and its derivatives from
    ``(x, p, k)``) or ``"polynomial"`` (the lowest-degree polynomial meeting the linear
    conditions on the function alone: ``conditions`` lists each one's ``(end, derivative)``
    terms, and ``program`` computes their coefficients and constants from ``(p, k)``).
    Programs are plain data (``bvpkit.program``).
    """

    name: str
    order: int
    kind: str
    program: dict | None = None
    conditions: list = field(default_factory=list)

    def __call__(self, x: np.ndarray, p: np.ndarray, k: np.ndarray) -> np.ndarray:
        """The function and its derivatives up to ``order - 1`` on ``x``: ``(order, len(x))``."""
        if self.kind == "expression":
            with np.errstate(all="ignore"):
                return np.broadcast_to(_function(self.program)(x, p, k), (self.order, x.size)).astype(float)
        if not self.conditions:
            return np.zeros((self.order, x.size))
        with np.errstate(all="ignore"):
            values = iter(_function(self.program)(np.zeros(1), p, k)[:, 0])
        a, b = float(x[0]), float(x[-1])
        rows, rhs = [], []
        for terms in self.conditions:
            row: dict = {}
            for end, j in terms:
                where = (a if end == 0 else b, j)
                row[where] = row.get(where, 0.0) + float(next(values))
            constant = float(next(values))
            if all(math.isfinite(v) for v in row.values()) and math.isfinite(constant):
                rows.append(row)
                rhs.append(-constant)
        return _fit(rows, rhs, self.order, x)

    def plain(self) -> dict[str, Any]:
        return {"name": self.name, "order": self.order, "kind": self.kind, "program": self.program,
                "conditions": [[list(t) for t in terms] for terms in self.conditions]}

    @classmethod
    def from_plain(cls, data: Mapping[str, Any]) -> GuessRecipe:
        return cls(str(data["name"]), int(data["order"]), str(data["kind"]), data["program"],
                   [[(int(end), int(j)) for end, j in terms] for terms in data["conditions"]])


_FUNCTIONS: dict[str, Any] = {}


def _function(program: dict) -> Any:
    import json

    key = json.dumps(program, sort_keys=True)
    function = _FUNCTIONS.get(key)
    if function is None:
        from .compiled import build_quantity

        function = _FUNCTIONS[key] = build_quantity(program)
    return function


def guess_recipes(problem, compiled: CompiledSystem) -> dict[str, GuessRecipe]:  # noqa: ANN001
    """The recipe of every unknown's default guess (its own guess expression, else the
    polynomial), built with SymPy once per problem and kept in ``problem._recipes``."""
    recipes = problem.__dict__.get("_recipes")
    if recipes is None:
        system = compiled.system if compiled.system is not None else problem.system
        recipes = {}
        for name in problem.unknowns:
            if name in problem.guess:
                recipes[name] = _expression_recipe(problem, system, name, problem.guess[name])
            else:
                recipes[name] = _polynomial_recipe(system, name)
        problem.__dict__["_recipes"] = recipes
    return recipes


def _expression_recipe(problem, system, name: str, e: sp.Expr) -> GuessRecipe:  # noqa: ANN001
    from .codegen import compile_expressions, derivative
    from .reduce import X

    names = {problem.x: X}
    names.update({sp.Symbol(c): system.k[i] for i, c in enumerate(system.constants)})
    names.update({sp.Symbol(q): system.p[i] for i, q in enumerate(system.parameters)})
    e = e.xreplace(names)
    order = system.order(name)
    derivatives = [e]
    for _ in range(order - 1):
        derivatives.append(derivative(derivatives[-1], X))
    f = compile_expressions(derivatives, [("x", [X]), ("p", system.p), ("k", system.k)], mesh="x")
    return GuessRecipe(name, order, "expression", f.program)


def _polynomial_recipe(system, name: str) -> GuessRecipe:  # noqa: ANN001
    """Lowest-degree polynomial meeting the linear conditions that involve ``name`` alone."""
    from .codegen import compile_expressions
    from .reduce import X

    order = system.order(name)
    conditions, exprs = [], []
    for gradient, constant in _linear_conditions(system, name):
        conditions.append([(end, j) for end, j, _ in gradient])
        exprs += [g for _, _, g in gradient] + [constant]
    if not conditions:
        return GuessRecipe(name, order, "polynomial")
    f = compile_expressions(exprs, [("x", [X]), ("p", system.p), ("k", system.k)], mesh="x")
    return GuessRecipe(name, order, "polynomial", f.program, conditions)


def _fit(rows: list[dict], rhs: list[float], order: int, x: np.ndarray) -> np.ndarray:
    """The lowest-degree polynomial meeting ``rows`` (``{(point, derivative): coefficient}``
    = ``rhs``), and its derivatives up to ``order - 1`` on ``x``."""
    if not rows:
        return np.zeros((order, x.size))
    a, b = float(x[0]), float(x[-1])
    degree = max(len(rows) - 1, 0)
    scale = b - a

    def basis(point: float, j: int) -> np.ndarray:
        s = (point - a) / scale
        out = np.zeros(degree + 1)
        for i in range(j, degree + 1):
            out[i] = math.perm(i, j) * s ** (i - j) / scale**j
        return out

    matrix = np.array([sum(g * basis(end, j) for (end, j), g in row.items()) for row in rows])
    coefficients = np.linalg.lstsq(matrix, np.array(rhs), rcond=None)[0]
    return np.array([
        sum(coefficients[i] * basis_values for i, basis_values in enumerate(_powers(x, a, scale, degree, j)))
        for j in range(order)
    ])


_LINEAR: dict[tuple[str, str], list] = {}


def _linear_conditions(system, name: str) -> list:  # noqa: ANN001
    """Conditions linear in the point values of ``name`` alone (symbolic work, cached per system)."""
    key = (system.key(), name)
    if key in _LINEAR:
        return _LINEAR[key]
    order = system.order(name)
    mine = {s for j in range(order) for s in (system.ya[system.index(name, j)], system.yb[system.index(name, j)])}
    every = set(system.ya) | set(system.yb)
    found = []
    for c in system.conditions:
        used = c.free_symbols & every
        if not used or not used <= mine:
            continue
        gradient = [(s, sp.diff(c, s)) for s in used]
        if any(g.free_symbols & every for _, g in gradient):
            continue  # nonlinear in the point values
        terms = [(0 if s in system.ya else 1, system.states[int(s.name[3:])][1], sp.Float(1) * g) for s, g in gradient]
        found.append((terms, sp.S.Zero + c.xreplace({s: 0 for s in used})))
    _LINEAR[key] = found
    return found


def _powers(x: np.ndarray, a: float, scale: float, degree: int, j: int) -> list[np.ndarray]:
    s = (x - a) / scale
    return [
        (math.perm(i, j) * s ** (i - j) / scale**j) if i >= j else np.zeros_like(x)
        for i in range(degree + 1)
    ]


def from_solution(solution, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:  # noqa: ANN001
    """States of a previous :class:`~bvpkit.Solution` on the mesh ``x``.

    Beyond the solution's own interval (a longer truncation of an infinite domain) the
    states are continued along their slope at the end.
    """
    y = solution._states(np.clip(x, solution.x[0], solution.x[-1]))
    slopes = solution._slopes_at_ends()
    right = x > solution.x[-1]
    left = x < solution.x[0]
    if right.any():
        y[:, right] += slopes[1][:, None] * (x[right] - solution.x[-1])
    if left.any():
        y[:, left] += slopes[0][:, None] * (x[left] - solution.x[0])
    return y, np.array(solution._p, dtype=float)


def fill_integrals(compiled: CompiledSystem, x: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray) -> None:
    """Set the added integral states to the running integrals of their integrands (in place).

    ``x`` is the physical variable.
    """
    system = compiled.layout
    if system.n == system.users:
        return
    with np.errstate(all="ignore"):
        integrands = compiled.physical(x, y, p, k)[system.users:]
    steps = 0.5 * (integrands[:, 1:] + integrands[:, :-1]) * np.diff(x)
    y[system.users:] = np.concatenate([np.zeros((steps.shape[0], 1)), np.cumsum(steps, axis=1)], axis=1)


def interior_zeros(values: np.ndarray) -> int:
    """Sign changes of a sampled function, ignoring samples within round-off of zero."""
    scale = np.max(np.abs(values)) if values.size else 0.0
    signs = np.sign(values[np.abs(values) > 1e-8 * scale])
    return int(np.count_nonzero(signs[1:] != signs[:-1]))


def eigen_guess(compiled: CompiledSystem, x: np.ndarray, k: np.ndarray, mode: int) -> tuple[np.ndarray, float]:
    """States ``(users, len(x))`` and eigenvalue of mode ``mode`` of a linear problem.

    Solves the trapezoidal-rule discretisation of the problem on a uniform mesh as a
    generalized matrix eigenproblem ``K v = lam L v`` (the equations are affine in the
    eigenvalue, so ``K`` and ``L`` come from the exact Jacobian at ``lam = 0`` and ``1``),
    and picks the eigenvector whose first unknown has ``mode - 1`` interior zeros, the
    smallest such eigenvalue in magnitude. A singular term ``S y / (x - a)`` enters through
    its limit at ``x = a``.
    """
    import scipy.linalg

    system = compiled.layout
    n, users = system.n, system.users
    which = system.eigenvalue
    a, b = float(x[0]), float(x[-1])
    nodes = max(121, 30 * mode + 1)
    t = np.linspace(a, b, nodes)
    y0 = np.zeros((n, nodes))
    p0 = np.zeros(len(system.parameters))
    p1 = p0.copy()
    p1[which] = 1.0
    with np.errstate(all="ignore"):
        A = compiled.jac(t, y0, p0, k)[:users, :users]
        B = compiled.jac(t, y0, p1, k)[:users, :users] - A
        ba, bb, _ = compiled.bc_jac(y0[:, 0], y0[:, -1], p0, k)
        ba1, bb1, _ = compiled.bc_jac(y0[:, 0], y0[:, -1], p1, k)
    S = compiled.singular(p0, k)
    if S is not None:
        S = S[:users, :users]
        with np.errstate(all="ignore"):
            A[:, :, 1:] += S[:, :, None] / (t[1:] - a)
        inverse = np.linalg.inv(np.eye(users) - S)
        A[:, :, 0] = inverse @ A[:, :, 0]
        B[:, :, 0] = inverse @ B[:, :, 0]
    m_user = users  # the homogeneous conditions come first, one per order
    ba_lam, bb_lam = ba1[:m_user, :users] - ba[:m_user, :users], bb1[:m_user, :users] - bb[:m_user, :users]
    ba, bb = ba[:m_user, :users], bb[:m_user, :users]
    size = users * nodes
    K = np.zeros((size, size))
    L = np.zeros((size, size))
    h = np.diff(t)
    eye = np.eye(users)
    for i in range(nodes - 1):
        r = slice(i * users, (i + 1) * users)
        c0, c1 = slice(i * users, (i + 1) * users), slice((i + 1) * users, (i + 2) * users)
        K[r, c0] = -eye / h[i] - 0.5 * A[:, :, i]
        K[r, c1] = eye / h[i] - 0.5 * A[:, :, i + 1]
        L[r, c0] = 0.5 * B[:, :, i]
        L[r, c1] = 0.5 * B[:, :, i + 1]
    rows = slice((nodes - 1) * users, size)
    K[rows, :users] = ba
    K[rows, size - users:] = bb
    L[rows, :users] = -ba_lam  # conditions affine in the eigenvalue (a column's shear condition)
    L[rows, size - users:] = -bb_lam
    values, vectors = scipy.linalg.eig(K, L)
    finite = np.isfinite(values) & (np.abs(values.imag) <= 1e-6 * (1 + np.abs(values.real)))
    candidates = []
    first = system.index(system.states[0][0], 0)
    for lam, v in zip(values[finite].real, vectors[:, finite].T):
        v = v.real.reshape(nodes, users).T
        if not np.any(v[first]):
            continue
        candidates.append((interior_zeros(v[first]), abs(lam), lam, v))
    if not candidates:
        raise ProblemError("the discretised eigenproblem has no real eigenvalue; check the equations and conditions")
    wanted = [c for c in candidates if c[0] == mode - 1]
    pool = sorted(wanted or candidates, key=lambda c: c[1])
    _, _, lam, v = pool[0] if wanted else pool[min(mode - 1, len(pool) - 1)]
    values_rows = [i for i, (_, order) in enumerate(system.states[:users]) if order == 0]
    norm = np.trapezoid(np.sum(v[values_rows] ** 2, axis=0), t)
    v = v / np.sqrt(norm)
    peak = np.argmax(np.abs(v[first][: max(2, nodes // (2 * mode))]))
    if v[first][peak] < 0:
        v = -v
    return np.array([np.interp(x, t, row) for row in v]), float(lam)


class Start:
    """A guess given as arrays on a mesh (what continuation predicts), used like a Solution.

    Parameters
    ----------
    compiled : CompiledSystem
    x : ndarray, shape (m,)
        Mesh in the physical variable.
    y : ndarray, shape (n, m)
    p : ndarray, shape (n_p,)
    k : ndarray
        Constants the slopes are evaluated with.
    """

    def __init__(self, compiled: CompiledSystem, x: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray):
        from .diagnostics import hermite

        self.x, self.y, self._p = np.asarray(x, float), np.asarray(y, float), np.asarray(p, float)
        self._compiled, self._k = compiled, np.asarray(k, float)
        self._spline = hermite(compiled, self.x, self.y, self._p, self._k, physical=True)

    @property
    def state_names(self) -> tuple[str, ...]:
        return self._compiled.layout.state_names

    def _states(self, points: np.ndarray) -> np.ndarray:
        return self._spline(np.asarray(points, float))

    def _slopes_at_ends(self) -> tuple[np.ndarray, np.ndarray]:
        with np.errstate(all="ignore"):
            f = self._compiled.slopes(self.x[[0, -1]], self.y[:, [0, -1]], self._p, self._k, physical=True)
        return f[:, 0], f[:, 1]
