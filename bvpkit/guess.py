"""Initial meshes and guesses.

Per unknown function, in order of preference: a guess passed to ``solve``, the problem's
own guess expression, or a default: the lowest-degree polynomial that satisfies the
function's linear boundary conditions (so ``y(0) = 0, y(1) = 1`` gives ``y = x``, and
``f(0) = f'(0) = 0, f'(L) = 1`` gives ``f = x**2 / (2 L)``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import sympy as sp

from .codegen import CompiledSystem, compile_expressions
from .errors import ProblemError
from .reduce import X

#: Nodes of the first mesh; solve_bvp refines it where the residual asks.
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
    """States ``(n, m)`` and parameters ``(n_p,)`` to start from on the mesh ``x``."""
    system = compiled.system
    p = np.array([problem.unknown_parameters[q] for q in system.parameters], dtype=float)
    y = np.zeros((system.n, x.size))
    expressions = dict(problem.guess)
    if override:
        for name, value in override.items():
            expressions[name] = problem._guesses({name: value})[name]
    for name in problem.unknowns:
        order = problem.orders[name]
        rows = [system.index(name, j) for j in range(order)]
        if name in expressions:
            y[rows] = _from_expression(problem, system, expressions[name], order, x, p, k)
        else:
            y[rows] = _polynomial(system, name, order, x, p, k)
    if not np.all(np.isfinite(y)):
        bad = np.argwhere(~np.isfinite(y))[0]
        raise ProblemError(
            f"the guess for {system.state_names[bad[0]]} is NaN or inf at "
            f"{problem.independent} = {x[bad[1]]:.6g}; give a guess defined on the whole domain"
        )
    return y, p


def _from_expression(problem, system, e: sp.Expr, order: int, x, p, k) -> np.ndarray:  # noqa: ANN001
    names = {problem.x: X}
    names.update({sp.Symbol(c): system.k[i] for i, c in enumerate(system.constants)})
    names.update({sp.Symbol(q): system.p[i] for i, q in enumerate(system.parameters)})
    e = e.xreplace(names)
    derivatives = [e]
    for _ in range(order - 1):
        derivatives.append(sp.diff(derivatives[-1], X))
    f = compile_expressions(
        derivatives, [("x", [X]), ("p", system.p), ("k", system.k)], mesh="x"
    )
    with np.errstate(all="ignore"):
        return np.broadcast_to(f(x, p, k), (order, x.size)).astype(float)


def _polynomial(system, name: str, order: int, x, p, k) -> np.ndarray:  # noqa: ANN001
    """Lowest-degree polynomial meeting the linear conditions that involve ``name`` alone."""
    a, b = float(x[0]), float(x[-1])
    values = {**dict(zip(system.p, map(float, p))), **dict(zip(system.k, map(float, k)))}
    rows, rhs = [], []
    for gradient, constant in _linear_conditions(system, name):
        try:
            numbers = [(end, j, float(g.xreplace(values))) for end, j, g in gradient]
            c0 = float(constant.xreplace(values))
        except TypeError:
            continue  # depends on a value we do not know here
        row = {}
        for end, j, g in numbers:
            where = a if end == 0 else b
            row[(where, j)] = row.get((where, j), 0.0) + g
        rows.append(row)
        rhs.append(-c0)
    if not rows:
        return np.zeros((order, x.size))
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
        found.append((terms, sp.sympify(0) + c.xreplace({s: 0 for s in used})))
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
