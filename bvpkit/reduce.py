"""Higher-order equations -> one first-order system ``y' = F(x, y, p)``.

The state layout is readable: for ``f'''`` and ``g''`` it is ``y0 = f, y1 = f', y2 = f'',
y3 = g, y4 = g'``. Every user name is replaced by an internal symbol (``_x``, ``_y0``,
``_p0``, ``_k0``; user names cannot start with ``_``), so nothing the user typed reaches the
generated code.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field, fields

import sympy as sp
from sympy.core.function import AppliedUndef

from .budget import budget, check_sizes
from .errors import ProblemError
from .expr import DomainIntegral
from .layout import States

X = sp.Symbol("_x")



def _symbols(prefix: str, n: int) -> tuple[sp.Symbol, ...]:
    return tuple(sp.Symbol(f"_{prefix}{i}") for i in range(n))


@dataclass(frozen=True)
class FirstOrderSystem(States):
    """A first-order system ``y' = rhs(x, y, p, k)`` with conditions ``bc(ya, yb, p, k) = 0``.

    Attributes
    ----------
    states : tuple of (str, int)
        For state ``i``, the unknown function and the derivative order it holds.
    rhs : tuple of sympy.Expr, length n
        Right-hand side in the symbols ``X``, ``y``, ``p``, ``k``.
    conditions : tuple of sympy.Expr, length n + len(parameters)
        Boundary conditions in ``ya``, ``yb``, ``p``, ``k``.
    parameters, constants : tuple of str
        Names of the unknown parameters (solved for) and known constants (given values).
    domain : (sympy.Expr, sympy.Expr)
        Physical ends in the symbols ``k`` and ``p``; ``oo`` for an infinite end.
    physical_rhs : tuple of sympy.Expr
        The full right-hand side in the physical independent variable (``rhs`` differs from
        it when the domain is rescaled or a singular term is split off).
    rescaled : bool
        A domain end is an unknown parameter: ``rhs`` is in ``t = (x - a) / (b - a)`` on
        ``[0, 1]`` and carries the factor ``b - a``.
    singular : tuple of tuple of sympy.Expr, or None
        The matrix ``S`` of a term ``S y / (x - a)`` singular at the left end; ``rhs`` then
        holds the regular rest.
    eigenvalue : int or None
        Index in ``parameters`` of the eigenvalue, and ``mode`` the mode asked for.
    users : int
        States ``0 .. users - 1`` hold the unknown functions; later ones are added states
        (integrals over the domain).
    """

    independent: str
    states: tuple[tuple[str, int], ...]
    rhs: tuple[sp.Expr, ...]
    conditions: tuple[sp.Expr, ...]
    parameters: tuple[str, ...]
    constants: tuple[str, ...]
    domain: tuple[sp.Expr, sp.Expr]
    condition_text: tuple[str, ...] = ()
    equation_text: tuple[str, ...] = ()
    physical_rhs: tuple[sp.Expr, ...] = ()
    rescaled: bool = False
    singular: tuple[tuple[sp.Expr, ...], ...] | None = None
    eigenvalue: int | None = None
    mode: int | None = None
    users: int = 0
    y: tuple[sp.Symbol, ...] = field(init=False)
    ya: tuple[sp.Symbol, ...] = field(init=False)
    yb: tuple[sp.Symbol, ...] = field(init=False)
    p: tuple[sp.Symbol, ...] = field(init=False)
    k: tuple[sp.Symbol, ...] = field(init=False)

    def __post_init__(self) -> None:
        n = len(self.states)
        object.__setattr__(self, "y", _symbols("y", n))
        object.__setattr__(self, "ya", _symbols("ya", n))
        object.__setattr__(self, "yb", _symbols("yb", n))
        object.__setattr__(self, "p", _symbols("p", len(self.parameters)))
        object.__setattr__(self, "k", _symbols("k", len(self.constants)))

    def layout(self) -> str:
        """The state layout as one line, for messages: ``y0 = f, y1 = f', y2 = f''``."""
        return ", ".join(f"y{i} = {s}" for i, s in enumerate(self.state_names))

    def state_layout(self):  # noqa: ANN201 - a bvpkit.layout.StateLayout
        """The plain facts of this system (what the numerical side needs; no SymPy)."""
        from .layout import StateLayout

        return StateLayout(
            key=self.key(), independent=self.independent, states=self.states, parameters=self.parameters,
            constants=self.constants, rescaled=self.rescaled, singular=self.singular is not None,
            eigenvalue=self.eigenvalue, mode=self.mode, users=self.users,
        )

    def highest(self, name: str) -> sp.Expr:
        """Expression of the highest derivative of ``name`` in the physical variable."""
        return self.physical_rhs[self.index(name, self.order(name) - 1)]

    def key(self) -> str:
        """A content hash: equal systems have equal keys (used for compiled-code caches)."""
        cached = self.__dict__.get("_key")
        if cached is None:
            text = repr(tuple(getattr(self, f.name) for f in fields(self) if f.init))
            cached = hashlib.sha256(text.encode()).hexdigest()[:32]
            object.__setattr__(self, "_key", cached)
        return cached


def reduce(problem) -> FirstOrderSystem:  # noqa: ANN001 - Problem imports us lazily
    """Reduce a validated :class:`~bvpkit.Problem` to a :class:`FirstOrderSystem`.

    Raises
    ------
    ProblemError
        When the highest derivatives cannot be isolated (a differential-algebraic system,
        or a highest derivative that appears nonlinearly with several roots).
    """
    states = tuple((name, k) for name in problem.unknowns for k in range(problem.orders[name]))
    n = len(states)
    y = _symbols("y", n)
    ya, yb = _symbols("ya", n), _symbols("yb", n)
    p = _symbols("p", len(problem.unknown_parameters))
    k = _symbols("k", len(problem.constants))
    names = {sp.Symbol(c): k[i] for i, c in enumerate(problem.constants)}
    names.update({sp.Symbol(q): p[i] for i, q in enumerate(problem.unknown_parameters)})
    names[problem.x] = X

    # Highest derivatives become placeholder symbols, lower ones become states.
    tops = {name: sp.Symbol(f"_top_{name}") for name in problem.unknowns}
    replace: dict[sp.Basic, sp.Basic] = dict(names)
    for i, (name, order) in enumerate(states):
        f = sp.Function(name)(problem.x)
        replace[f if order == 0 else sp.Derivative(f, (problem.x, order))] = y[i]
    for name in problem.unknowns:
        f = sp.Function(name)(problem.x)
        replace[sp.Derivative(f, (problem.x, problem.orders[name]))] = tops[name]
    equations = [eq.xreplace(replace) for eq in problem.equations]
    for eq, text in zip(equations, problem.equation_text):
        leftover = eq.atoms(AppliedUndef, sp.Derivative)
        if leftover:  # pragma: no cover - Problem validation prevents this
            raise ProblemError(f"equation ({text}): could not read {sorted(map(str, leftover))[0]}")
    with budget("isolating the highest derivatives", advice="write each equation solved for its highest derivative"):
        solved = _isolate(equations, [tops[n_] for n_ in problem.unknowns], problem)
    check_sizes({f"the expression of {n_}{chr(39) * problem.orders[n_]}": e for n_, e in zip(problem.unknowns, solved)},
                step="isolating the highest derivatives")

    rhs: list[sp.Expr] = []
    for i, (name, order) in enumerate(states):
        if order + 1 < problem.orders[name]:
            rhs.append(y[i + 1])
        else:
            rhs.append(solved[problem.unknowns.index(name)])

    # Integrals over the domain in conditions become added states z' = integrand, z(a) = 0.
    integrals: list[sp.Basic] = []
    for c in problem.conditions:
        for g in sorted(c.atoms(DomainIntegral), key=sp.default_sort_key):
            if g not in integrals:
                integrals.append(g)
    extra_states = [(f"integral({_as_written(g.args[0], problem)})", 0) for g in integrals]
    extra_rhs = [g.args[0].xreplace(replace) for g in integrals]
    eigen_index = None
    if problem.eigenvalue is not None:
        eigen_index = list(problem.unknown_parameters).index(problem.eigenvalue)
        with budget("checking that the eigenvalue problem is linear"):
            _check_linear(rhs, conditions_of(problem, states, ya, yb, names), y[:n], p[eigen_index], problem)
        values = [y[i] for i, (_, order) in enumerate(states) if order == 0]
        extra_states.append(("integral of the squares (normalisation)", 0))
        extra_rhs.append(sum(v**2 for v in values))
    total = n + len(extra_states)
    y = _symbols("y", total)
    ya, yb = _symbols("ya", total), _symbols("yb", total)
    all_states = states + tuple(extra_states)

    conditions = conditions_of(problem, states, ya, yb, names, {g: yb[n + j] for j, g in enumerate(integrals)})
    for j in range(len(extra_states)):
        conditions.append(ya[n + j])
    if problem.eigenvalue is not None:
        conditions.append(yb[total - 1] - 1)
    physical = list(rhs) + extra_rhs
    if problem.phase:
        # u'(a) = 0 for the first unknown pins the phase of an autonomous periodic orbit
        conditions.append(physical[0].xreplace(dict(zip(y, ya))))

    domain = tuple(end.xreplace(names) for end in problem.domain)
    rescaled = any(s in end.free_symbols for end in domain for s in p)
    method_rhs = list(physical)
    singular = None
    if rescaled:
        if any(e in (sp.oo, -sp.oo) for e in domain):
            raise ProblemError("a domain with an unknown end must be finite at the other end")
        a, b = domain
        method_rhs = [(b - a) * r.xreplace({X: a + (b - a) * X}) for r in physical]
        _refuse_singular(method_rhs, sp.Integer(0), sp.Integer(1), problem, "an unknown end")
    elif all(e not in (sp.oo, -sp.oo) for e in domain):
        with budget("splitting off the singular term", advice="write the singular coefficient in a simpler form"):
            singular, method_rhs = _split_singular(physical, y, domain, problem)
        check_sizes({f"the right-hand side of state y{i}": e for i, e in enumerate(method_rhs)},
                    step="splitting off the singular term")
    return FirstOrderSystem(
        independent=problem.independent,
        states=all_states,
        rhs=tuple(method_rhs),
        conditions=tuple(conditions),
        parameters=tuple(problem.unknown_parameters),
        constants=tuple(problem.constants),
        domain=domain,  # type: ignore[arg-type]
        condition_text=tuple(problem.condition_text),
        equation_text=tuple(problem.equation_text),
        physical_rhs=tuple(physical),
        rescaled=rescaled,
        singular=singular,
        eigenvalue=eigen_index,
        mode=problem.mode,
        users=n,
    )


def _as_written(e: sp.Expr, problem) -> str:  # noqa: ANN001
    """``e`` printed as a person writes it: ``y'`` rather than ``Derivative(y(x), x)``."""
    swap = {}
    for d in e.atoms(sp.Derivative):
        swap[d] = sp.Symbol(d.expr.func.__name__ + "'" * d.derivative_count)
    for f in e.atoms(AppliedUndef):
        swap[f] = sp.Symbol(f.func.__name__)
    return sp.sstr(e.xreplace(swap))


def conditions_of(problem, states, ya, yb, names, integrals=None) -> list[sp.Expr]:  # noqa: ANN001
    """The problem's conditions with point values (and integrals) replaced by end states."""
    conditions = []
    for c in problem.conditions:
        swap: dict[sp.Basic, sp.Basic] = dict(integrals or {})
        for node, name, order, point in problem.point_values(c):
            end = problem.which_end(point)
            swap[node] = (ya if end == 0 else yb)[states.index((name, order))]
        swap.update({s: names[s] for s in c.free_symbols if s in names})
        conditions.append(c.xreplace(swap))
    return conditions


def _check_linear(rhs, conditions, y, lam, problem) -> None:  # noqa: ANN001
    """An eigenvalue problem must be linear and homogeneous, and linear in the eigenvalue."""
    name = problem.eigenvalue
    jac = sp.Matrix(rhs).jacobian(list(y))
    if any(jac.has(s) for s in y) or any(sp.simplify(r.xreplace({s: 0 for s in y})) != 0 for r in rhs):
        raise ProblemError(
            f"eigenvalue '{name}': the equations must be linear and homogeneous in the unknown "
            "functions (no terms without them, no products of them)"
        )
    if any(sp.simplify(sp.diff(entry, lam, 2)) != 0 for entry in jac):
        raise ProblemError(
            f"eigenvalue '{name}': the equations are not linear in the eigenvalue once solved for "
            "the highest derivatives; write them so that it multiplies the functions, "
            f"e.g. y'' + {name}*y = 0"
        )
    ends = [s for c in conditions for s in c.free_symbols if s.name.startswith(("_ya", "_yb"))]
    for c in conditions:
        if sp.diff(c, lam, 2) != 0:
            raise ProblemError(f"eigenvalue '{name}': the boundary conditions are not linear in it")
        zero = c.xreplace({s: 0 for s in ends})
        if sp.simplify(zero) != 0 or any(sp.diff(c, s, 2) != 0 for s in c.free_symbols if s in ends):
            raise ProblemError(
                f"eigenvalue '{name}': the conditions must be linear and homogeneous (= 0); "
                "bvpkit adds the normalisation itself"
            )


def _refuse_singular(rhs, a, b, problem, what: str) -> None:  # noqa: ANN001
    for end in (a, b):
        for r in rhs:
            if _blows_up(r.xreplace({X: end})):
                raise ProblemError(
                    f"the equations are singular at an end of a domain with {what} "
                    f"(a term like 1/{problem.independent}); this combination is not supported"
                )


def _blows_up(e: sp.Expr) -> bool:
    return bool(e.has(sp.zoo, sp.nan, sp.oo, -sp.oo))


def _split_singular(physical, y, domain, problem):  # noqa: ANN001, ANN202
    """Split ``S y / (x - a) + f(x, y)`` off a right-hand side singular at the left end ``a``.

    SciPy's ``solve_bvp`` treats such a term exactly (its argument ``S``). Terms singular
    at the right end, or singular terms that are not of this form, are refused by name.
    """
    a, b = domain
    name = problem.independent
    for r in physical:
        if _blows_up(r.xreplace({X: b})):
            raise ProblemError(
                f"the equations are singular at the right end {name} = {b}: bvpkit treats "
                f"singular terms at the left end only; reverse the direction of {name}"
            )
    rows = [i for i, r in enumerate(physical) if _blows_up(r.xreplace({X: a}))]
    if not rows:
        return None, list(physical)
    n = len(physical)
    S = [[sp.Integer(0)] * n for _ in range(n)]
    regular = list(physical)
    for i in rows:
        g = sp.cancel(sp.together((X - a) * physical[i]))
        for j in range(n):
            entry = sp.simplify(sp.diff(g, y[j]).xreplace({X: a}))
            if entry.has(*y) or _blows_up(entry):
                raise ProblemError(f"the singular coefficient {sp.sstr(entry)} at {name} = {a} is not of the form S y/({name} - a)")
            S[i][j] = entry
        rest = sp.cancel(sp.together(physical[i] - sum(S[i][j] * y[j] for j in range(n)) / (X - a)))
        if _blows_up(rest.xreplace({X: a})):
            raise ProblemError(
                f"the term {sp.sstr(physical[i])} is singular at {name} = {a} in a way bvpkit cannot "
                f"treat (only terms S y/({name} - a) are, e.g. (2/{name})*y')"
            )
        regular[i] = rest
    return tuple(tuple(row) for row in S), regular


def _isolate(equations: list[sp.Expr], tops: list[sp.Symbol], problem) -> list[sp.Expr]:  # noqa: ANN001
    names = [f"{n}{chr(39) * problem.orders[n]}" for n in problem.unknowns]
    jac = sp.Matrix(equations).jacobian(tops)
    if not any(jac.has(t) for t in tops):
        # Linear in the highest derivatives: one exact linear solve.
        rest = sp.Matrix([eq.xreplace({t: 0 for t in tops}) for eq in equations])
        if jac.is_diagonal() and all(jac[i, i] != 0 for i in range(len(tops))):
            return [-rest[i] / jac[i, i] for i in range(len(tops))]  # each equation holds its own: no O(n^3) LU
        if len(tops) == 1:
            if jac[0, 0] == 0:
                raise ProblemError(f"the equation does not contain {names[0]}")
            return [-rest[0] / jac[0, 0]]
        if jac.rank(simplify=True) < len(tops):
            raise ProblemError(
                f"the equations cannot be solved for the highest derivatives {', '.join(names)} "
                "(they form a differential-algebraic system); differentiate a constraint or "
                "rewrite the system"
            )
        return list(jac.LUsolve(-rest))
    # A symbolic solve for highest derivatives that appear nonlinearly can run for minutes and
    # mostly finds several roots or none: refused at once, with what to write instead.
    nonlinear = [name for name, t in zip(names, tops) if any(entry.has(t) for entry in jac)]
    raise ProblemError(
        f"highest derivatives that appear nonlinearly ({', '.join(nonlinear)}) are not isolated by bvpkit: "
        f"write each equation solved for its highest derivative ({nonlinear[0]} = ...)"
    )
