"""The test set's own reading of an instance: exact-solution check and SciPy's functions.

Independent of bvpkit's parser: the prime notation is turned into SymPy symbols by two
regular expressions (``y'(1)`` is a point value, ``y''`` a derivative), the equation is
solved for its highest derivative, and ``lambdify`` gives the right-hand side, its exact
Jacobian and the conditions for ``scipy.integrate.solve_bvp``. A bvpkit parsing mistake
therefore shows as a difference between bvpkit and SciPy, not as a shared error.

:func:`check_exact` verifies an exact solution before it is trusted: the residual of the
equation with derivatives of the exact function taken by finite differences, and the
conditions at the ends.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any

import numpy as np
import sympy as sp
from scipy import special

from .testset_instances import Instance

#: Largest accepted scaled residual ``|sum of terms| / (1 + sum of |terms|)`` of the
#: equation for an exact solution. Finite-difference derivatives (9-point stencils, the best
#: step per point, one-sided at the ends) reach 1e-11 to 2e-8 on these problems, the worst
#: next to the ends where one-sided stencils amplify rounding; a misremembered formula
#: leaves 1e-3 or more.
EXACT_RESIDUAL_TOL = 1e-7
#: The same for the conditions. They are mostly values (no differencing), so a constant
#: remembered wrongly by as little as 1e-10 shows here even where the equation cannot see
#: it (a homogeneous linear equation is met by any multiple of its solution).
EXACT_CONDITION_TOL = 1e-10

_STENCIL = 9  # points of the finite-difference stencils: order 9 - k for the k-th derivative
_STEP_HALVINGS = 24  # steps from L/16 down to L/16/2**23 ~ 7e-9 L; the best one is kept per point
_CHECK_UNIFORM = 801  # uniform check points, plus the clusters below
_CHECK_CLUSTER = 80  # check points on each side of an end or layer, geometric from 1e-7 L

_NAMES: dict[str, Any] = {
    "exp": sp.exp, "log": sp.log, "ln": sp.log, "sqrt": sp.sqrt, "sin": sp.sin, "cos": sp.cos,
    "tan": sp.tan, "sinh": sp.sinh, "cosh": sp.cosh, "tanh": sp.tanh, "erf": sp.erf, "erfc": sp.erfc,
    "abs": sp.Abs, "pi": sp.pi, "e": sp.E,
}
_NUMPY = [{"erf": special.erf, "erfc": special.erfc}, "numpy"]
X = sp.Symbol("x")


class TranslationError(ValueError):
    """An instance the test set's own reader cannot take (a mistake in the instance)."""


def _derivative_symbols(order: int) -> list[sp.Symbol]:
    return [sp.Symbol(f"_d{j}") for j in range(order + 1)]


def _sympify(text: str, constants: dict[str, float]) -> sp.Expr:
    local = dict(_NAMES)
    local["x"] = X
    local.update({c: sp.Float(v, 17) for c, v in constants.items()})
    return sp.sympify(text, locals=local)


@dataclass
class Translated:
    """An instance read by the test set: SymPy forms and the callables for SciPy.

    Attributes
    ----------
    order : int
        Order of the equation; the first-order state is ``(y, y', ..., y^(order-1))``.
    terms : list of callables
        The additive terms of ``lhs - rhs``, each ``term(x, d0, ..., d_order)``.
    conditions : list of (callable, list of (order, end))
        Each condition's terms as a callable of its point values, and which point values.
    """

    instance: Instance
    order: int
    rhs: Any
    jac: Any
    bc_fun: Any
    bc_jac_fun: Any
    terms: list[Any]
    conditions: list[tuple[list[Any], list[tuple[int, int]]]]
    guess_coefficients: np.ndarray

    # --- callables for scipy.integrate.solve_bvp -------------------------------------------
    def fun(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        return np.vstack([*y[1:], np.broadcast_to(self.rhs(x, *y), x.shape)])

    def fun_jac(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        n = self.order
        out = np.zeros((n, n, x.size))
        for i in range(n - 1):
            out[i, i + 1] = 1.0
        for j, entry in enumerate(self.jac):
            out[n - 1, j] = np.broadcast_to(entry(x, *y), x.shape)
        return out

    def bc(self, ya: np.ndarray, yb: np.ndarray) -> np.ndarray:
        return np.array([float(f(*ya, *yb)) for f in self.bc_fun])

    def bc_jac(self, ya: np.ndarray, yb: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        n = self.order
        m = np.array([[float(f(*ya, *yb)) for f in row] for row in self.bc_jac_fun])
        return m[:, :n], m[:, n:]

    def guess(self, x: np.ndarray) -> np.ndarray:
        """The lowest-degree polynomial meeting the linear conditions, and its derivatives."""
        poly = np.polynomial.Polynomial(self.guess_coefficients)
        return np.vstack([poly.deriv(j)(x) if j else poly(x) for j in range(self.order)])


_READ: dict[str, Translated] = {}


def translate(instance: Instance) -> Translated:
    """Read ``instance`` with the test set's own reader (see the module docstring)."""
    if instance.name not in _READ:
        _READ[instance.name] = _translate(instance)
    return _READ[instance.name]


def _translate(instance: Instance) -> Translated:
    if len(instance.equations) != 1:
        raise TranslationError(f"{instance.name}: the test set reads one equation per instance")
    u = re.escape(instance.unknown)
    a, b = instance.domain
    constants = dict(instance.constants)

    # the equation: every u, u', u'' ... not followed by "(" is a derivative symbol
    text = instance.equations[0]
    if text.count("=") != 1:
        raise TranslationError(f"{instance.name}: expected one '=' in {text!r}")
    order = max(len(m.group(1)) for m in re.finditer(rf"\b{u}('*)(?![\w(])", text))
    if re.search(rf"\b{u}'*\(", text):
        raise TranslationError(f"{instance.name}: point values in the equation are not read here")
    text = re.sub(rf"\b{u}('*)(?![\w(])", lambda m: f"_d{len(m.group(1))}", text)
    lhs, rhs = text.split("=")
    expr = _sympify(lhs, constants) - _sympify(rhs, constants)
    d = _derivative_symbols(order)
    solved = sp.solve(expr, d[order])
    if len(solved) != 1:
        raise TranslationError(f"{instance.name}: the equation does not give one highest derivative")
    top = solved[0]
    args = (X, *d[:order])
    rhs_fun = sp.lambdify(args, top, modules=_NUMPY)
    jac = [sp.lambdify(args, sp.diff(top, dj), modules=_NUMPY) for dj in d[:order]]
    terms = [sp.lambdify((X, *d), t, modules=_NUMPY) for t in sp.Add.make_args(expr)]

    # the conditions: u^(j)(point) becomes a symbol standing for that value at end a or b
    ya = [sp.Symbol(f"_a{j}") for j in range(order)]
    yb = [sp.Symbol(f"_b{j}") for j in range(order)]
    bc_exprs: list[sp.Expr] = []
    conditions = []
    for cond in instance.conditions:
        used: list[tuple[int, int]] = []

        def point(m: re.Match, used: list[tuple[int, int]] = used) -> str:
            j = len(m.group(1))
            where = float(_sympify(m.group(2), constants))
            if math.isclose(where, a, abs_tol=1e-14):
                end = 0
            elif math.isclose(where, b, abs_tol=1e-14):
                end = 1
            else:
                raise TranslationError(f"{instance.name}: condition at {where}, not at an end")
            if j >= order:
                raise TranslationError(
                    f"{instance.name}: condition on derivative {j} of an order-{order} equation")
            used.append((j, end))
            return f"_{'ab'[end]}{j}"

        ctext = re.sub(rf"\b{u}('*)\(([^()]*)\)", point, cond)
        if ctext.count("=") != 1:
            raise TranslationError(f"{instance.name}: expected one '=' in {cond!r}")
        left, right = ctext.split("=")
        cexpr = _sympify(left, constants) - _sympify(right, constants)
        bc_exprs.append(cexpr)
        cterms = [sp.lambdify((*ya, *yb), t, modules=_NUMPY) for t in sp.Add.make_args(cexpr)]
        conditions.append((cterms, used))
    if len(bc_exprs) != order:
        raise TranslationError(f"{instance.name}: {len(bc_exprs)} conditions for an order-{order} equation")
    bc_fun = [sp.lambdify((*ya, *yb), e, modules=_NUMPY) for e in bc_exprs]
    bc_jac = [[sp.lambdify((*ya, *yb), sp.diff(e, v), modules=_NUMPY) for v in (*ya, *yb)] for e in bc_exprs]
    return Translated(instance, order, rhs_fun, jac, bc_fun, bc_jac, terms, conditions,
                      _polynomial_guess(bc_exprs, ya, yb, a, b, order))


def _polynomial_guess(bc_exprs, ya, yb, a, b, order) -> np.ndarray:
    """Coefficients (in x) of the lowest-degree polynomial meeting the conditions linear in the
    point values (the others are ignored); zero when none is met by any degree tried."""
    linear = [e for e in bc_exprs if all(sp.diff(e, v, 2) == 0 for v in (*ya, *yb))]
    for degree in range(len(linear) + 1):
        c = sp.symbols(f"_c0:{degree + 1}")
        poly = sum(ci * X**i for i, ci in enumerate(c))
        values = {}
        for j in range(order):
            dj = sp.diff(poly, X, j)
            values[ya[j]] = dj.subs(X, a)
            values[yb[j]] = dj.subs(X, b)
        equations = [e.subs(values) for e in linear]
        solution = sp.linsolve(equations, c)
        if solution != sp.S.EmptySet:
            (found,) = solution
            free = {s: 0 for s in sp.Tuple(*found).free_symbols}
            return np.array([float(sp.sympify(v).subs(free)) for v in found])
    return np.zeros(1)


# --- exact-solution check --------------------------------------------------------------------


def _weights(offsets: np.ndarray, k: int) -> np.ndarray:
    """Finite-difference weights of the k-th derivative on unit-spaced ``offsets``."""
    n = offsets.size
    v = np.vander(offsets.astype(float), n, increasing=True).T  # v[q, j] = offsets[j]**q
    rhs = np.zeros(n)
    rhs[k] = math.factorial(k)
    return np.linalg.solve(v, rhs)


def derivatives(f, x: np.ndarray, order: int, a: float, b: float) -> list[np.ndarray]:
    """Finite-difference derivatives ``[f, f', ..., f^(order)]`` at ``x`` for each step of
    the ladder; returns a list over steps of arrays shaped ``(order + 1, x.size)``.

    The stencil is shifted inside ``[a, b]`` near the ends, so ``f`` is never evaluated
    outside the domain.
    """
    length = b - a
    n = _STENCIL
    half = n // 2
    f0 = f(x)
    out = []
    for s in range(_STEP_HALVINGS):
        h = length / 16 / 2**s
        room_left = np.floor((x - a) / h + 1e-9).astype(int)
        room_right = np.floor((b - x) / h + 1e-9).astype(int)
        centre = np.clip(np.minimum(half, room_left), n - 1 - room_right, None)  # index of x in the stencil
        result = np.empty((order + 1, x.size))
        result[0] = f0
        for c in np.unique(centre):
            sel = centre == c
            offsets = np.arange(n) - c
            values = np.array([f(x[sel] + h * o) for o in offsets])  # (n, k)
            for k in range(1, order + 1):
                result[k, sel] = _weights(offsets, k) @ values / h**k
        out.append(result)
    return out


def check_points(instance: Instance, uniform: int = _CHECK_UNIFORM, cluster: int = _CHECK_CLUSTER,
                 smallest: float = 1e-7) -> np.ndarray:
    """Uniform points plus geometric clusters at both ends and at every layer (``focus``)."""
    a, b = instance.domain
    length = b - a
    near = np.geomspace(smallest * length, 0.3 * length, cluster)
    parts = [np.linspace(a, b, uniform), a + near, b - near]
    for c in instance.focus:
        parts += [c - near, c + near]
    x = np.unique(np.concatenate(parts))
    return x[(x >= a) & (x <= b)]


@dataclass
class ExactCheck:
    """Outcome of :func:`check_exact`: the worst scaled residuals seen."""

    name: str
    ode_residual: float
    bc_residual: float
    problem: str = ""

    @property
    def ok(self) -> bool:
        return (not self.problem and self.ode_residual <= EXACT_RESIDUAL_TOL
                and self.bc_residual <= EXACT_CONDITION_TOL)


def check_exact(instance: Instance) -> ExactCheck:
    """Verify ``instance.exact`` against the instance's own equation and conditions.

    The residual at each point is ``|sum of terms| / (1 + sum of |terms|)`` of ``lhs - rhs``
    with the derivatives of the exact function by finite differences, at the best of a
    ladder of steps (a false formula is wrong at every step). The exact function must
    also evaluate without overflow, division by zero or NaN.
    """
    try:
        tr = translate(instance)
    except TranslationError as err:
        return ExactCheck(instance.name, math.inf, math.inf, str(err))
    a, b = instance.domain
    x = check_points(instance)
    try:
        with np.errstate(over="raise", divide="raise", invalid="raise", under="ignore"):
            ladder = derivatives(instance.exact, x, tr.order, a, b)
            ends = derivatives(instance.exact, np.array([a, b]), tr.order, a, b)
    except FloatingPointError as err:
        return ExactCheck(instance.name, math.inf, math.inf, f"exact solution: {err}")
    if not all(np.isfinite(r).all() for r in ladder[:1]) or not np.isfinite(instance.exact(x)).all():
        return ExactCheck(instance.name, math.inf, math.inf, "exact solution is not finite")
    best = np.full(x.size, np.inf)
    for ders in ladder:
        with np.errstate(all="ignore"):
            values = [np.broadcast_to(t(x, *ders), x.shape) for t in tr.terms]
            scaled = np.abs(np.sum(values, axis=0)) / (1 + np.sum(np.abs(values), axis=0))
        best = np.fmin(best, np.where(np.isfinite(scaled), scaled, np.inf))
    bc_worst = 0.0
    for cterms, _used in tr.conditions:
        cbest = math.inf
        for ders in ends:
            ya, yb = ders[: tr.order, 0], ders[: tr.order, 1]
            vals = [float(t(*ya, *yb)) for t in cterms]
            cbest = min(cbest, abs(sum(vals)) / (1 + sum(abs(v) for v in vals)))
        bc_worst = max(bc_worst, cbest)
    return ExactCheck(instance.name, float(np.max(best)), bc_worst)
