"""Higher-order equations -> one first-order system ``y' = F(x, y, p)``.

The state layout is readable: for ``f'''`` and ``g''`` it is ``y0 = f, y1 = f', y2 = f'',
y3 = g, y4 = g'``. Every user name is replaced by an internal symbol (``_x``, ``_y0``,
``_p0``, ``_k0``; user names cannot start with ``_``), so nothing the user typed reaches the
generated code.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import sympy as sp
from sympy.core.function import AppliedUndef

from .errors import ProblemError

X = sp.Symbol("_x")

# sympy.solve on a highest derivative that appears nonlinearly can be slow for hostile input;
# real problems isolate in well under a second.
_MAX_OPS_FOR_NONLINEAR_SOLVE = 400


def _symbols(prefix: str, n: int) -> tuple[sp.Symbol, ...]:
    return tuple(sp.Symbol(f"_{prefix}{i}") for i in range(n))


@dataclass(frozen=True)
class FirstOrderSystem:
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
        Ends in the symbols ``k`` and ``p``; ``oo`` for an infinite end.
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

    @property
    def n(self) -> int:
        return len(self.states)

    @property
    def state_names(self) -> tuple[str, ...]:
        """``("f", "f'", "f''")``: what each state holds, as a person writes it."""
        return tuple(name + "'" * k for name, k in self.states)

    def layout(self) -> str:
        """The state layout as one line, for messages: ``y0 = f, y1 = f', y2 = f''``."""
        return ", ".join(f"y{i} = {s}" for i, s in enumerate(self.state_names))

    def index(self, name: str, order: int) -> int:
        return self.states.index((name, order))

    def order(self, name: str) -> int:
        return 1 + max(k for f, k in self.states if f == name)

    def highest(self, name: str) -> sp.Expr:
        """Expression of the highest derivative of ``name`` (the rhs of its last state)."""
        return self.rhs[self.index(name, self.order(name) - 1)]

    def key(self) -> str:
        """A content hash: equal systems have equal keys (used for compiled-code caches)."""
        cached = self.__dict__.get("_key")
        if cached is None:
            text = repr((self.states, self.rhs, self.conditions, self.parameters, self.constants))
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
    solved = _isolate(equations, [tops[n_] for n_ in problem.unknowns], problem)

    rhs: list[sp.Expr] = []
    for i, (name, order) in enumerate(states):
        if order + 1 < problem.orders[name]:
            rhs.append(y[i + 1])
        else:
            rhs.append(solved[problem.unknowns.index(name)])

    conditions = []
    for c in problem.conditions:
        swap: dict[sp.Basic, sp.Basic] = {}
        for node, name, order, point in problem.point_values(c):
            end = problem.which_end(point)
            swap[node] = (ya if end == 0 else yb)[states.index((name, order))]
        swap.update({s: names[s] for s in c.free_symbols if s in names})
        conditions.append(c.xreplace(swap))

    domain = tuple(end.xreplace(names) for end in problem.domain)
    return FirstOrderSystem(
        independent=problem.independent,
        states=states,
        rhs=tuple(rhs),
        conditions=tuple(conditions),
        parameters=tuple(problem.unknown_parameters),
        constants=tuple(problem.constants),
        domain=domain,  # type: ignore[arg-type]
        condition_text=tuple(problem.condition_text),
        equation_text=tuple(problem.equation_text),
    )


def _isolate(equations: list[sp.Expr], tops: list[sp.Symbol], problem) -> list[sp.Expr]:  # noqa: ANN001
    names = [f"{n}{chr(39) * problem.orders[n]}" for n in problem.unknowns]
    jac = sp.Matrix(equations).jacobian(tops)
    if not any(jac.has(t) for t in tops):
        # Linear in the highest derivatives: one exact linear solve.
        rest = sp.Matrix([eq.xreplace({t: 0 for t in tops}) for eq in equations])
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
    size = sum(sp.count_ops(eq) for eq in equations)
    if size > _MAX_OPS_FOR_NONLINEAR_SOLVE:
        raise ProblemError(
            f"the highest derivatives {', '.join(names)} appear nonlinearly in a large "
            "expression; isolate them by hand (write the equation as f'' = ...)"
        )
    try:
        roots = sp.solve(equations, tops, dict=True)
    except (NotImplementedError, ValueError, TypeError):
        roots = []
    if len(roots) != 1 or set(roots[0]) != set(tops):
        how = "no closed-form root" if not roots else f"{len(roots)} roots"
        raise ProblemError(
            f"the highest derivatives {', '.join(names)} appear nonlinearly and sympy finds "
            f"{how} for them; isolate them by hand (write the equation as {names[0]} = ...)"
        )
    return [roots[0][t] for t in tops]
