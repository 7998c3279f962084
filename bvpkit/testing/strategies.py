"""Hypothesis strategies that draw well-posed BVPs with known exact solutions.

Every problem is built by the method of manufactured solutions: an exact solution ``u`` is
drawn from a family of smooth functions, the forcing ``g`` is computed with SymPy so that
``u`` solves the equation, and the boundary values are read off ``u``. Well-posedness is
built in rather than hoped for: each operator is one whose boundary-value problem is known
to have exactly one solution for the condition kinds drawn with it (a positive reaction
term under a maximum principle, a monotone nonlinearity, a positive-definite beam operator,
small perturbations of ``u''' = g``).

hypothesis is imported when a strategy is called, not when this module is imported.
"""

from __future__ import annotations

from typing import Any

import sympy as sp

from .cases import Manufactured

X = sp.Symbol("x")
U = sp.Function("u")


def _st() -> Any:
    try:
        from hypothesis import strategies
    except ImportError as err:  # pragma: no cover - hypothesis comes with the test extra
        from ..errors import MissingExtraError

        raise MissingExtraError('bvpkit.testing strategies need hypothesis: pip install "bvpkit[test]"') from err
    return strategies


def _number(st: Any, lo: float, hi: float, nonzero: bool = False) -> Any:
    """Short decimals (two significant places) keep the printed problems readable."""
    values = st.integers(int(round(lo * 20)), int(round(hi * 20))).map(lambda i: sp.Rational(i, 20))
    return values.filter(lambda v: v != 0) if nonzero else values


def smooth_functions(decaying: bool = False) -> Any:
    """Smooth functions of ``x`` (SymPy expressions): sums of two terms from a small family.

    With ``decaying=True`` every term decays to zero as ``x -> inf`` (for semi-infinite
    domains).
    """
    st = _st()
    amp = _number(st, -2, 2, nonzero=True)
    rate = _number(st, 0.5, 2.5)
    if decaying:
        term = st.one_of(
            st.builds(lambda a, r: a * sp.exp(-r * X), amp, rate),
            st.builds(lambda a, r: a * X * sp.exp(-r * X), amp, rate),
            st.builds(lambda a, r: a / (1 + X) ** 2 * sp.exp(-r * X), amp, rate),
        )
    else:
        term = st.one_of(
            st.builds(lambda a, b, c: a + b * X + c * X**2, amp, amp, amp),
            st.builds(lambda a, r: a * sp.exp(r * X / 2), amp, rate),
            st.builds(lambda a, r, c: a * sp.sin(r * X + c), amp, rate, amp),
            st.builds(lambda a, r, c: a * sp.tanh(r * (X - c)), amp, rate, amp),
            st.builds(lambda a, r: a / (1 + r * X**2), amp, rate),
        )
    return st.builds(lambda s, t: s + t, term, term).filter(lambda e: e != 0)


def _domain(st: Any) -> Any:
    return st.tuples(st.sampled_from([sp.Integer(0), sp.Integer(-1), sp.Rational(1, 2)]),
                     _number(st, 0.5, 3)).map(lambda t: (t[0], t[0] + t[1]))


def _coefficient(st: Any, lo: float, hi: float) -> Any:
    """A variable coefficient c0 + c1 x^2 with values in roughly [lo, hi] on small domains."""
    return st.builds(lambda c0, c1: c0 + c1 * X**2, _number(st, lo, hi), _number(st, 0, max(0.0, (hi - lo) / 4)))


def _at(u: sp.Expr, order: int, point: sp.Expr) -> sp.Expr:
    return sp.diff(u, X, order).subs(X, point) if order else u.subs(X, point)


def _value(order: int, point: sp.Expr) -> Any:
    f = U(X) if order == 0 else sp.Derivative(U(X), (X, order))
    return f.subs(X, point) if order == 0 else sp.Subs(f, X, point)


def _condition(u: sp.Expr, kind: str, point: sp.Expr, side: int, alpha: sp.Expr) -> tuple[sp.Expr, str]:
    """A boundary condition of ``kind`` at ``point`` that ``u`` satisfies."""
    if kind == "dirichlet":
        return sp.Eq(_value(0, point), _at(u, 0, point)), "Dirichlet"
    if kind == "neumann":
        return sp.Eq(_value(1, point), _at(u, 1, point)), "Neumann"
    # Robin with the sign that keeps the maximum principle: u' - alpha u at the left end,
    # u' + alpha u at the right end, alpha > 0
    sign = -1 if side == 0 else 1
    lhs = _value(1, point) + sign * alpha * _value(0, point)
    return sp.Eq(lhs, _at(u, 1, point) + sign * alpha * _at(u, 0, point)), "Robin"


def _problem(lhs: sp.Expr, u: sp.Expr, conditions: list, domain: tuple, label: str) -> Manufactured:
    from ..language.problem import Problem

    g = lhs.subs(U(X), u).doit()
    equation = sp.Eq(lhs, g)
    problem = Problem([equation], conditions, domain)
    text = f"{sp.sstr(equation)} on {domain}, {label}, exact u = {sp.sstr(u)}"
    return Manufactured(problem, u, text)


def linear_problems(orders: tuple[int, ...] = (1, 2, 3, 4)) -> Any:
    """Linear problems of the given orders with variable coefficients and known solutions.

    * order 1: ``u' = a(x) u + g``, one Dirichlet condition at either end;
    * order 2: ``u'' = q(x) u + c u' + g`` with ``q >= 0.2``, Dirichlet/Neumann/Robin at each end;
    * order 3: ``u''' = c(x) u + g`` with a small ``c``, ``u(a), u'(a)`` and ``u(b)`` or ``u'(b)``;
    * order 4: ``u'''' = -q(x) u + g`` with ``q >= 0``, each end clamped or simply supported.
    """
    st = _st()

    @st.composite
    def draw(draw_: Any) -> Manufactured:
        order = draw_(st.sampled_from(list(orders)))
        u = draw_(smooth_functions())
        a, b = draw_(_domain(st))
        d = [sp.Derivative(U(X), (X, j)) if j else U(X) for j in range(5)]
        if order == 1:
            lhs = d[1] - draw_(_coefficient(st, -1, 1)) * d[0]
            end = draw_(st.sampled_from([a, b]))
            return _problem(lhs, u, [sp.Eq(_value(0, end), _at(u, 0, end))], (a, b), "Dirichlet at one end")
        if order == 2:
            q = draw_(_coefficient(st, 0.2, 3))
            c = draw_(_number(st, -1, 1))
            lhs = d[2] - q * d[0] - c * d[1]
            alpha = draw_(_number(st, 0.5, 2))
            kinds = draw_(st.tuples(*[st.sampled_from(["dirichlet", "neumann", "robin"])] * 2))
            left, lname = _condition(u, kinds[0], a, 0, alpha)
            right, rname = _condition(u, kinds[1], b, 1, alpha)
            return _problem(lhs, u, [left, right], (a, b), f"{lname} / {rname}")
        if order == 3:
            length = b - a
            c = draw_(_number(st, -0.5, 0.5)) / length**3  # small: a perturbation of u''' = g
            lhs = d[3] - c * d[0]
            far = draw_(st.sampled_from([0, 1]))
            conditions = [sp.Eq(_value(0, a), _at(u, 0, a)), sp.Eq(_value(1, a), _at(u, 1, a)),
                          sp.Eq(_value(far, b), _at(u, far, b))]
            return _problem(lhs, u, conditions, (a, b), "u(a), u'(a), " + ("u'(b)" if far else "u(b)"))
        q = draw_(_coefficient(st, 0, 2))
        lhs = d[4] + q * d[0]
        conditions, names = [], []
        for point in (a, b):
            kind = draw_(st.sampled_from(["clamped", "simply supported"]))
            second = 1 if kind == "clamped" else 2
            conditions += [sp.Eq(_value(0, point), _at(u, 0, point)), sp.Eq(_value(second, point), _at(u, second, point))]
            names.append(kind)
        return _problem(lhs, u, conditions, (a, b), " / ".join(names))

    return draw()


MAX_NONLINEAR_SIZE = 4.0


def _largest(u: sp.Expr, a: sp.Expr, b: sp.Expr) -> float:
    import numpy as np

    values = sp.lambdify(X, u, modules="numpy")(np.linspace(float(a), float(b), 33))  # our own expression
    return float(np.max(np.abs(np.broadcast_to(values, (33,)))))


def manufactured_problems() -> Any:
    """Nonlinear problems ``u'' = F(u) + c u' + g(x)`` with monotone ``F`` (unique solutions).

    Exact solutions are kept to ``|u| <= 4`` on the domain. ``F`` is drawn from ``k u + m u^3``, ``k u + m sinh(u)``, ``k exp(u)`` (``k, m > 0``);
    conditions Dirichlet or Robin at each end.
    """
    st = _st()

    @st.composite
    def draw(draw_: Any) -> Manufactured:
        from hypothesis import assume

        u = draw_(smooth_functions())
        a, b = draw_(_domain(st))
        # keep |u| moderate: sinh(u) or exp(u) of a solution of size 10 is a stiff problem
        # no default guess reaches, not a test of the solver's correctness
        assume(_largest(u, a, b) <= MAX_NONLINEAR_SIZE)
        k = draw_(_number(st, 0.5, 2))
        m = draw_(_number(st, 0.05, 1))
        c = draw_(_number(st, -0.5, 0.5))
        kind = draw_(st.sampled_from(["cubic", "sinh", "exp"]))
        w = U(X)
        F = {"cubic": k * w + m * w**3, "sinh": k * w + m * sp.sinh(w), "exp": k * sp.exp(w)}[kind]
        lhs = sp.Derivative(w, (X, 2)) - F - c * sp.Derivative(w, X)
        alpha = draw_(_number(st, 0.5, 2))
        kinds = draw_(st.tuples(*[st.sampled_from(["dirichlet", "robin"])] * 2))
        left, lname = _condition(u, kinds[0], a, 0, alpha)
        right, rname = _condition(u, kinds[1], b, 1, alpha)
        return _problem(lhs, u, [left, right], (a, b), f"{kind} nonlinearity, {lname} / {rname}")

    return draw()


def semi_infinite_problems() -> Any:
    """``u'' = q u + g`` on ``(0, inf)`` with a decaying exact solution, ``u(inf) = 0``."""
    st = _st()

    @st.composite
    def draw(draw_: Any) -> Manufactured:
        from ..language.problem import Problem

        u = draw_(smooth_functions(decaying=True))
        q = draw_(_number(st, 0.5, 4))
        left_kind = draw_(st.sampled_from([0, 1]))
        lhs = sp.Derivative(U(X), (X, 2)) - q * U(X)
        g = lhs.subs(U(X), u).doit()
        conditions = [sp.Eq(_value(left_kind, sp.Integer(0)), _at(u, left_kind, sp.Integer(0))),
                      sp.Eq(U(sp.oo), 0)]
        problem = Problem([sp.Eq(lhs, g)], conditions, (0, "inf"))
        given = "u(0)" if left_kind == 0 else "u'(0)"
        text = f"{sp.sstr(sp.Eq(lhs, g))} on (0, inf), {given} given, u(inf) = 0, exact u = {sp.sstr(u)}"
        return Manufactured(problem, u, text)

    return draw()
