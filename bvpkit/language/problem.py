"""``Problem``: a boundary-value problem as written on paper, validated once, then frozen.

A ``Problem`` holds SymPy expressions only; it does no number crunching and keeps no
caches. Unknown functions are ``Function(name)(x)``, derivatives are ``Derivative``, point
values are ``f(0)`` or ``Subs(Derivative(f(x), x), x, oo)``, one-sided values at an
interface ``SideValue(f(L), -1)`` (``f(L-)``).

What a solver needs is made from it by :func:`bvpkit.prepare` (the reduction to the one
standard form, then compiled code); see ``reduce.py`` and ``prepared.py``.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from .._lazy import LazyModule, applied_undef
from ..errors import ExpressionError, ProblemError, closest
from . import limits as _limits
from .exact import exact_key
from .options import SolveOptions

sp = LazyModule("sympy")  # imported when a problem is first built from text
_expr = LazyModule("bvpkit.language.expr")

Text = Any  # a string, or a SymPy expression


_SOLUTION_AS_GUESS = (
    "a previous Solution is a start for the solver, not part of the problem: pass it to "
    "bvpkit.solve(problem, guess=solution) (or give an expression per function here, e.g. guess={'y': 'x*(1 - x)'})"
)


def _is_solution(value: Any) -> bool:
    """Whether ``value`` is a solution (it has the map back every Solution carries)."""
    return hasattr(value, "interpolant") and hasattr(value, "prepared")


def _check_guess_kind(guess: Any) -> None:
    """``guess`` is a mapping of function name to expression (a Solution belongs to solve())."""
    if guess is None or isinstance(guess, Mapping):
        return
    if _is_solution(guess):
        raise ProblemError(f"guess: {_SOLUTION_AS_GUESS}")
    raise ProblemError(
        f"guess must be a mapping of function name to expression, e.g. {{'y': 'x*(1 - x)'}}, got {type(guess).__name__}"
    )


def _describe(item: Text) -> str:
    return item if isinstance(item, str) else sp.sstr(item)


@dataclass(frozen=True)
class PointValue:
    """One point value in a condition or expression.

    Attributes
    ----------
    node : sympy.Basic
        The node as it stands in the expression (``f(0)``, a ``Subs``, or a ``SideValue``).
    name : str
        The unknown function.
    order : int
        The derivative taken.
    point : sympy.Expr
        Where: a number, an expression of constants and parameters, or ``oo``.
    side : int
        -1 from the left (``f(L-)``), +1 from the right (``f(L+)``), 0 as written ``f(L)``.
    """

    node: Any
    name: str
    order: int
    point: Any
    side: int = 0


@dataclass(frozen=True)
class Region:
    """A stretch of the domain between two neighbouring points (ends or interfaces).

    Attributes
    ----------
    equations : tuple of sympy.Expr
        The equations that hold here (each ``expr = 0``).
    equation_text : tuple of str
    constants : dict of str to float
        Constants with a value of their own in this region (they replace the problem's
        value in this region's equations).
    label : str
        How messages name the region ("region 2", or the problem itself for one region).
    """

    equations: tuple
    equation_text: tuple
    constants: dict
    label: str


class Problem:
    """A boundary-value problem for ordinary differential equations.

    Parameters
    ----------
    equations : sequence of str or SymPy Eq/Expr
        The differential equations as on paper, e.g. ``"f''' + f*f''/2 = 0"``. A SymPy
        ``Expr`` means ``expr = 0``.
    conditions : sequence of str or SymPy Eq/Expr
        Boundary conditions, e.g. ``"f'(inf) = 1"``. A point value inside the domain makes
        that point an interface (``"w(L) = 0"`` on a domain ``(0, 2*L)``); at an interface
        ``f(L-)`` and ``f(L+)`` are the values from the left and from the right. Every state
        is continuous across an interface unless a condition there uses its one-sided values.
    domain : (a, b)
        Ends of the interval: numbers, ``"inf"``/``"-inf"``/``sympy.oo``, or an expression
        of constants and unknown parameters (``"L"``, ``"pi/2"``, ``"s"``).
    independent : str
        Name of the independent variable (default ``"x"``).
    unknowns : sequence of str, optional
        Names of the unknown functions; inferred from the equations when omitted.
    constants : mapping of str to float, optional
        Known values usable in any expression.
    unknown_parameters : mapping of str to float, optional
        Parameters determined by the solve (name: initial guess); each needs one more condition.
    guess : mapping of str to str/number/SymPy, optional
        An initial guess per unknown function, as an expression of the independent variable.
    outputs : mapping of str to str, optional
        Named quantities reported after a solve, e.g. ``{"wall_shear": "f''(0)"}``.
    settings : mapping, optional
        Solver settings carried along with the problem (e.g. from a spec file); keyword
        arguments of :func:`bvpkit.solve` override them.
    title : str, optional
        A one-line description used in summaries.
    eigenvalue : str, optional
        For a linear homogeneous problem: the name of the eigenvalue. bvpkit adds it as an
        unknown parameter and adds the normalisation ``integral(sum of squares of the
        unknown functions) = 1``, so the conditions are the homogeneous ones only.
    mode : int, optional
        Which eigenvalue: mode ``k`` has ``k - 1`` interior zeros in the first unknown
        function (the Sturm-Liouville count); default 1 when ``eigenvalue`` is given.
    regions : sequence of mappings, optional
        The domain cut into regions, left to right, each ``{"end": point, "equations":
        [...], "constants": {...}}``: ``end`` is where the region stops (omit it for the
        last), ``equations`` replace the problem's equations there, ``constants`` give
        constants a value of their own there. Every region has the same unknown functions.

    Raises
    ------
    ProblemError, ExpressionError
        On anything that does not make a well-posed problem, with a message that names the
        offending item.
    """

    def __init__(
        self,
        equations: Sequence[Text] | Text,
        conditions: Sequence[Text],
        domain: Sequence[Any],
        *,
        independent: str = "x",
        unknowns: Sequence[str] | None = None,
        constants: Mapping[str, float] | None = None,
        unknown_parameters: Mapping[str, float] | None = None,
        guess: Mapping[str, Any] | None = None,
        outputs: Mapping[str, str] | None = None,
        settings: Mapping[str, Any] | None = None,
        title: str = "",
        eigenvalue: str | None = None,
        mode: int | None = None,
        regions: Sequence[Mapping[str, Any]] | None = None,
    ):
        _check_guess_kind(guess)
        # The arguments as given: plain data from which a worker process (or a cluster
        # node, or a cached preparation) rebuilds this problem.
        self.arguments = dict(
            equations=equations, conditions=conditions, domain=domain, independent=independent,
            unknowns=unknowns, constants=dict(constants or {}), unknown_parameters=dict(unknown_parameters or {}),
            guess=dict(guess or {}), outputs=dict(outputs or {}), settings=dict(settings or {}), title=title,
            eigenvalue=eigenvalue, mode=mode, regions=[dict(r) for r in regions] if regions is not None else None,
        )
        self.title = str(title)
        self.independent = _expr.check_name(independent, "independent variable")
        self.x = sp.Symbol(self.independent)
        self.constants = _numbers(constants or {}, "constant")
        self.unknown_parameters = _numbers(unknown_parameters or {}, "unknown parameter")
        self.settings = dict(settings or {})
        self.options = SolveOptions.make(self.settings)  # the solver's settings, checked once
        overlap = set(self.constants) & set(self.unknown_parameters)
        if overlap:
            raise ProblemError(f"'{sorted(overlap)[0]}' is both a constant and an unknown parameter")
        if self.independent in self.constants or self.independent in self.unknown_parameters:
            raise ProblemError(f"'{self.independent}' is the independent variable and a constant")
        self.eigenvalue, self.mode = self._eigenvalue(eigenvalue, mode)

        if isinstance(equations, str | sp.Basic):
            equations = [equations]
        self.equation_text = [_describe(e) for e in _list(equations, "equations")]
        self.condition_text = [_describe(c) for c in _list(conditions, "conditions")]
        raw_equations = [self._read(e, f"equation {i + 1}") for i, e in enumerate(equations)]
        raw_conditions = [self._read(c, f"condition {i + 1}") for i, c in enumerate(conditions)]
        region_input = self._region_input(regions)
        raw_regional = [
            [self._read(e, f"{label}, equation {i + 1}") for i, e in enumerate(items)] if items is not None else None
            for label, _, items, _ in region_input
        ]

        everything = raw_equations + [e for eqs in raw_regional if eqs for e in eqs]
        self.unknowns = self._infer_unknowns(everything, raw_conditions, unknowns)
        self.equations = [
            self._canonical(e, f"equation {i + 1}", self.equation_text[i]) for i, e in enumerate(raw_equations)
        ]
        self.orders = self._orders(self.equations, "the equations")
        self.domain = self._domain(domain)
        self.conditions = [
            self._canonical(c, f"condition {i + 1}", self.condition_text[i]) for i, c in enumerate(raw_conditions)
        ]
        self.regions, self.points = self._regions(region_input, raw_regional)
        self.jumps = self._check_conditions()
        self.guess = self._guesses(guess or {})
        self.outputs = self._outputs(outputs or {})
        self._frozen = True
        # The reduction validates what only it can see (isolating the highest derivatives,
        # singular terms), so a Problem that constructs is a Problem that can be prepared.
        from ..reduce.form import standard_form
        from .budget import preparation

        with preparation("reducing the problem to first order", advice="simplify the equations"):
            standard_form(self)

    def __setattr__(self, name: str, value: Any) -> None:
        if self.__dict__.get("_frozen"):
            raise AttributeError(f"a Problem is frozen once built; use with_constants(...) (tried to set '{name}')")
        object.__setattr__(self, name, value)

    # -- reading ------------------------------------------------------------------------
    def _eigenvalue(self, eigenvalue: str | None, mode: Any) -> tuple[str | None, int | None]:
        if eigenvalue is None:
            if mode is not None:
                raise ProblemError("mode is given but no eigenvalue: name it with eigenvalue=\"...\"")
            return None, None
        _expr.check_name(eigenvalue, "eigenvalue")
        if eigenvalue in self.constants or eigenvalue in self.unknown_parameters:
            raise ProblemError(f"eigenvalue '{eigenvalue}' must not also be a constant or unknown parameter")
        mode = 1 if mode is None else mode
        if isinstance(mode, bool) or not isinstance(mode, int) or not 1 <= mode <= 1000:
            raise ProblemError(f"mode must be a whole number from 1 to 1000, got {mode!r}")
        return eigenvalue, mode

    def _read(self, item: Text, where: str) -> sp.Expr:
        if isinstance(item, str):
            try:
                return _expr.parse_equation(item, self.x)
            except ExpressionError as err:
                raise ExpressionError(f"{where}: {err.reason}", err.text, err.column) from None
        if isinstance(item, sp.Equality):
            return item.lhs - item.rhs
        if isinstance(item, sp.Expr):
            return item
        raise ProblemError(f"{where}: expected a string or a SymPy expression, got {type(item).__name__}")

    @property
    def _names(self) -> list[str]:
        return [*self.constants, *self.unknown_parameters, *([self.eigenvalue] if self.eigenvalue else [])]

    def _infer_unknowns(self, equations: list, conditions: list, given: Sequence[str] | None) -> list[str]:
        found: list[str] = []
        for eq in equations:
            for f in sorted(eq.atoms(applied_undef()), key=sp.default_sort_key):
                if f.args != (self.x,):
                    self._check_applied(f, eq)  # a point value (refused later) or a mistyped function
                if f.func.__name__ not in found:
                    found.append(f.func.__name__)
        if given is None:
            names = found
        else:
            names = [_expr.check_name(n, "unknown function") for n in _list(given, "unknowns")]
            if len(set(names)) != len(names):
                raise ProblemError(f"unknowns {names} name a function twice")
            extra = [n for n in found if n not in names]
            if extra:
                raise ProblemError(
                    f"'{extra[0]}' is used as a function in the equations but is not among the unknowns {names}"
                )
        if not names:
            raise ProblemError("no unknown function found: write derivatives with primes, e.g. \"y'' + y = 0\"")
        for n in names:
            _expr.check_name(n, "unknown function")
            if n == self.independent or n in self._names:
                raise ProblemError(f"'{n}' is an unknown function and also another kind of name")
        return names

    def _is_point(self, f: sp.Basic) -> bool:
        return not (f.args[0].free_symbols - {sp.Symbol(n) for n in self._names})

    def _check_applied(self, f: sp.Basic, where: sp.Expr) -> None:
        """``exq(y)``: a name applied like a function to something that is not a point."""
        if self._is_point(f):
            return
        name = f.func.__name__
        raise ProblemError(
            f"'{name}({sp.sstr(f.args[0])})': '{name}' is not a known function{closest(name, _expr.FUNCTIONS)}; "
            f"an unknown function is written bare or with primes (y, y'), and evaluated at a point as y(0)"
        )

    def _canonical(self, e: sp.Expr, where: str, text: str) -> sp.Expr:
        """Map free names onto the problem's own symbols and functions; check every name."""
        replace: dict[sp.Basic, sp.Basic] = {}
        known = [self.independent, *self._names, *self.unknowns]
        for s in e.free_symbols:
            if s.name == self.independent:
                replace[s] = self.x
            elif s.name in self.unknowns:
                replace[s] = sp.Function(s.name)(self.x)
            elif s.name in self._names:
                replace[s] = sp.Symbol(s.name)
            else:
                raise ProblemError(f"{where} ({text}): unknown name '{s.name}'{closest(s.name, known)}")
        for f in e.atoms(applied_undef()):
            name = f.func.__name__
            if name not in self.unknowns:
                if f.args != (self.x,) and not self._is_point(f):
                    self._check_applied(f, e)
                raise ProblemError(f"{where} ({text}): '{name}' is not an unknown function{closest(name, self.unknowns)}")
        e = e.xreplace(replace) if replace else e
        # brackets with primes, ((1 + b*T)*T')', are differentiated now that T is T(x)
        e = e.replace(lambda d: isinstance(d, sp.Derivative) and not isinstance(d.expr, applied_undef()),
                      lambda d: d.doit())
        bound = {d for s in e.atoms(sp.Subs) for d in s.expr.atoms(sp.Derivative)}
        for d in e.atoms(sp.Derivative) - bound:
            if len(d.variables) and any(v != self.x for v in d.variables):
                raise ProblemError(f"{where} ({text}): derivatives must be taken with respect to '{self.independent}'")
            if not isinstance(d.expr, applied_undef()):
                raise ProblemError(f"{where} ({text}): write derivatives of unknown functions only")
        return e

    def _orders(self, equations: list, where: str) -> dict[str, int]:
        orders = {n: 0 for n in self.unknowns}
        if len(equations) != len(self.unknowns):
            # more unknowns than equations: a name that is never differentiated and reads like a
            # known function is most likely one mistyped (tahn(x))
            if len(equations) < len(self.unknowns):
                for name in self.unknowns:
                    hint = closest(name, _expr.FUNCTIONS)
                    if hint and not any(d.expr.func.__name__ == name for e in equations for d in e.atoms(sp.Derivative)):
                        raise ProblemError(
                            f"'{name}' is not a known function{hint}; as written it is read as another unknown "
                            f"function, which leaves {len(equations)} equation(s) for {len(self.unknowns)} "
                            f"unknown functions ({', '.join(self.unknowns)})"
                        )
            raise ProblemError(
                f"{len(equations)} equation(s) in {where} for {len(self.unknowns)} unknown "
                f"function(s) ({', '.join(self.unknowns)}): give one differential equation per unknown"
            )
        for eq in equations:
            if eq.has(_expr.DomainIntegral):
                raise ProblemError(
                    "integral(...) may appear in conditions and outputs only; for an integral inside an "
                    "equation introduce a new unknown function"
                )
            if eq.atoms(sp.Subs) or eq.has(_expr.SideValue) or any(f.args != (self.x,) for f in eq.atoms(applied_undef())):
                raise ProblemError(
                    "point values such as f'(0) inside an equation are not supported; introduce an unknown "
                    "parameter instead"
                )
            for d in eq.atoms(sp.Derivative):
                orders[d.expr.func.__name__] = max(orders[d.expr.func.__name__], d.derivative_count)
        for name, order in orders.items():
            if order == 0:
                raise ProblemError(
                    f"'{name}' appears without derivatives in {where}: every unknown function needs a "
                    "derivative in the equations (algebraic unknowns are not supported)"
                )
        return {name: int(order) for name, order in orders.items()}  # plain ints, not SymPy's

    # -- the domain, its interfaces and regions -------------------------------------------
    def _point(self, end: Any, what: str) -> sp.Expr:
        """A domain end or interface: a number, 'inf', or an expression of constants and parameters."""
        if isinstance(end, bool):
            raise ProblemError(f"{what} {end!r} is not a number")
        if isinstance(end, int | float):
            end_value = _limits.check_end(end, what)  # NaN, or beyond the float range
            if math.isinf(end_value):
                return sp.oo if end_value > 0 else -sp.oo
            return sp.Integer(end) if isinstance(end, int) else sp.Float(end)
        if isinstance(end, str):
            try:
                value = _expr.parse(end, self.x)
            except ExpressionError as err:
                raise ExpressionError(f"{what}: {err.reason}", err.text, err.column) from None
        elif isinstance(end, sp.Expr):
            value = end
        else:
            raise ProblemError(f"{what} {end!r}: expected a number, 'inf' or a name")
        bad = [s.name for s in value.free_symbols if s.name not in self._names]
        if bad:
            raise ProblemError(
                f"{what} '{end}': unknown name '{bad[0]}' (it may use constants and unknown parameters)"
                f"{closest(bad[0], self._names)}"
            )
        if value.has(applied_undef(), sp.Derivative, sp.Subs):
            raise ProblemError(f"{what} '{end}' may not use unknown functions")
        return value.xreplace({s: sp.Symbol(s.name) for s in value.free_symbols})

    def _domain(self, domain: Sequence[Any]) -> tuple[sp.Expr, sp.Expr]:
        if isinstance(domain, str) or not isinstance(domain, Sequence | tuple) or len(domain) != 2:
            raise ProblemError(f"domain must be a pair (a, b), got {domain!r}")
        a, b = (self._point(end, "domain end") for end in domain)
        self._check_order([a, b], [_describe(domain[0]), _describe(domain[1])])
        return a, b

    def value(self, point: sp.Expr, what: str = "") -> float:
        """The value of a point (constants and parameter guesses substituted)."""
        values = {**self.constants, **self.unknown_parameters}
        return point_value(point, values, what)

    def _check_order(self, points: list, labels: list[str]) -> None:
        """Domain ends and interfaces strictly increasing, finite inside (one place for every value)."""
        last = len(points) - 1
        values = [self.value(p, f"{'domain end' if i in (0, last) else 'interface'} {labels[i]}")
                  for i, p in enumerate(points)]
        check_positions(values, labels, self.independent)

    def _region_input(self, regions: Any) -> list[tuple[str, Any, Any, dict]]:
        """``(label, end or None, equations or None, constants)`` per region as given."""
        if regions is None:
            return []
        if isinstance(regions, str | Mapping) or not isinstance(regions, Iterable):
            raise ProblemError("regions must be a list of mappings, each {\"end\": ..., \"equations\": [...]}")
        found = []
        items = list(regions)
        if len(items) < 2:
            raise ProblemError("regions: give at least two regions (one region is the problem itself)")
        for i, region in enumerate(items):
            label = f"region {i + 1}"
            if not isinstance(region, Mapping):
                raise ProblemError(f"{label}: expected a mapping with keys end, equations, constants")
            unknown = set(region) - {"end", "equations", "constants"}
            if unknown:
                key = sorted(unknown)[0]
                raise ProblemError(f"{label}: unknown key '{key}'{closest(key, ['end', 'equations', 'constants'])}"
                                   " (known keys: end, equations, constants)")
            end = region.get("end")
            if end is None and i < len(items) - 1:
                raise ProblemError(f"{label}: give its end (where it meets {label[:-1]}{i + 2})")
            if end is not None and i == len(items) - 1:
                raise ProblemError(f"{label} is the last region: it ends where the domain does; drop its 'end'")
            equations = region.get("equations")
            if equations is not None:
                equations = [equations] if isinstance(equations, str) else _list(equations, f"{label} equations")
            own = region.get("constants") or {}
            if not isinstance(own, Mapping):
                raise ProblemError(f"{label}: constants must be a mapping of name to number")
            for name in own:
                if name not in self.constants:
                    raise ProblemError(
                        f"{label}: '{name}' is not a constant of the problem{closest(name, self.constants)}; "
                        "a region gives its own value to constants the problem declares"
                    )
            found.append((label, end, equations, _numbers(own, f"{label} constant", names_known=True)))
        return found

    def _regions(self, given: list, raw: list) -> tuple[list[Region], list]:
        """The regions between neighbouring points, and the points: ends, then interfaces in order.

        Interfaces are the ends of the regions given, and every point inside the domain at
        which a condition takes a value. Points are matched by their expression (``L``
        and ``L`` are one point; ``1`` and ``L`` with ``L = 1`` are two, and refused).
        """
        a, b = self.domain
        cuts: list[tuple[sp.Expr, int | None]] = []  # (point, index of the region given that ends there)
        for i, (label, end, _, _) in enumerate(given):
            if end is not None:
                point = self._point(end, f"{label} end")
                cuts.append((point, i))
        for i, c in enumerate(self.conditions):
            for pv in self.point_values(c, f"condition {i + 1} ({self.condition_text[i]})"):
                if self._same(pv.point, a) or self._same(pv.point, b):
                    continue
                if all(not self._same(pv.point, q) for q, _ in cuts):
                    cuts.append((pv.point, None))
        given_ends = [(p, i) for p, i in cuts if i is not None]
        if given_ends:  # the regions are listed left to right: their ends must be in that order
            self._check_order([a, *(p for p, _ in given_ends), b],
                              [_describe(a), *(_describe(p) for p, _ in given_ends), _describe(b)])
        labels = {id(p): _describe(p) for p, _ in cuts}
        for point, _ in cuts:
            if point in (sp.oo, -sp.oo):
                raise ProblemError(f"an interface at {point} is not inside the domain")
        ordered = sorted(cuts, key=lambda c: self.value(c[0], f"interface {_describe(c[0])}"))
        self._check_order([a, *(p for p, _ in ordered), b],
                          [_describe(a), *(labels[id(p)] for p, _ in ordered), _describe(b)])
        regions = []
        region_given = 0
        for piece in range(len(ordered) + 1):
            label = f"region {piece + 1}" if ordered else "the domain"
            if given:
                _, _, _, own = given[region_given]
                equations_raw = raw[region_given]
                text = self.arguments["regions"][region_given].get("equations")
                if equations_raw is not None:
                    texts = [text] if isinstance(text, str) else [_describe(t) for t in text]
                    equations = [self._canonical(e, f"{given[region_given][0]}, equation {j + 1}", texts[j])
                                 for j, e in enumerate(equations_raw)]
                    orders = self._orders(equations, f"{given[region_given][0]}")
                    if orders != self.orders:
                        raise ProblemError(
                            f"{given[region_given][0]}: its equations give the orders {orders}, the problem's "
                            f"{self.orders}; every region needs the same unknown functions of the same orders"
                        )
                else:
                    equations, texts = self.equations, self.equation_text
            else:
                own, equations, texts = {}, self.equations, self.equation_text
            regions.append(Region(tuple(equations), tuple(texts), dict(own), label))
            if piece < len(ordered) and ordered[piece][1] is not None:
                region_given += 1
        return regions, [a, *(p for p, _ in ordered), b]

    def _same(self, p: sp.Expr, q: sp.Expr) -> bool:
        if p == q:
            return True
        if p.has(sp.oo, -sp.oo) or q.has(sp.oo, -sp.oo):
            return False  # inf and -inf are different ends (their float difference compares as "near")
        if p.is_number and q.is_number:
            try:
                return abs(float(p) - float(q)) <= 1e-12 * max(1.0, abs(float(q)))
            except (TypeError, ValueError):
                return False
        return sp.simplify(p - q) == 0

    def which_point(self, point: sp.Expr) -> int | None:
        """Index of ``point`` among :attr:`points` (ends and interfaces), or None."""
        for j, q in enumerate(self.points):
            if self._same(point, q):
                return j
        return None

    # -- conditions -----------------------------------------------------------------------
    def point_values(self, e: sp.Expr, where: str = "expression") -> list[PointValue]:
        """Every point value in ``e``, one-sided ones included."""
        found: list[PointValue] = []
        sided = list(e.atoms(_expr.SideValue))
        inner = set()
        for s in sided:
            value, side = s.args
            for pv in self._plain_points(value, where):
                found.append(PointValue(s, pv.name, pv.order, pv.point, int(side)))
                inner.add(pv.node)
        found += [pv for pv in self._plain_points(e.xreplace({s: sp.Dummy() for s in sided}), where)
                  if pv.node not in inner]
        return found

    def _plain_points(self, e: sp.Expr, where: str) -> list[PointValue]:
        found = []
        for s in e.atoms(sp.Subs):
            d = s.expr
            if not isinstance(d, sp.Derivative) or not isinstance(d.expr, applied_undef()):
                raise ProblemError(f"{where}: cannot read the point value {s}")
            (v,) = s.variables if len(s.variables) == 1 else (None,)
            if v is None or d.expr.args != (v,) or any(w != v for w in d.variables):
                raise ProblemError(f"{where}: cannot read the point value {s}")
            found.append(PointValue(s, d.expr.func.__name__, int(d.derivative_count), s.point[0]))
        bound = {f for s in e.atoms(sp.Subs) for f in s.expr.atoms(applied_undef())}
        for f in e.atoms(applied_undef()) - bound:
            if f.args != (self.x,):
                found.append(PointValue(f, f.func.__name__, 0, f.args[0]))
        return found

    def _check_conditions(self) -> dict[int, set]:
        """Check every condition; return the states that jump at each interface (point index ->
        {(function, order)}): those a condition takes one-sided values of."""
        jumps: dict[int, set] = {j: set() for j in range(1, len(self.points) - 1)}
        plain: list[tuple[str, PointValue, int]] = []
        for i, c in enumerate(self.conditions):
            where = f"condition {i + 1} ({self.condition_text[i]})"
            integrals = c.atoms(_expr.DomainIntegral)
            outside = c.xreplace({g: sp.Symbol("_integral") for g in integrals})
            if self.x in outside.free_symbols:
                raise ProblemError(
                    f"{where}: a condition holds at points; write point values such as f(0) or f'(inf), "
                    f"not '{self.independent}' or bare functions"
                )
            for g in integrals:
                if self.point_values(g.args[0]):
                    raise ProblemError(f"{where}: an integrand may not hold point values such as f(0)")
                if any(d.derivative_count >= self.orders[d.expr.func.__name__] for d in g.args[0].atoms(sp.Derivative)):
                    raise ProblemError(f"{where}: an integrand may use derivatives below each function's order")
            points = self.point_values(outside, where)
            if not points and not integrals:
                raise ProblemError(f"{where}: names no point value such as f(0)")
            for pv in points:
                j = self.which_point(pv.point)
                if j is None:  # pragma: no cover - every interior point became an interface
                    raise ProblemError(f"{where}: the point {pv.point} is not an end or interface of the domain")
                if pv.order >= self.orders[pv.name]:
                    raise ProblemError(
                        f"{where}: {pv.name} has order {self.orders[pv.name]} in the equations, so a condition "
                        f"may use its derivatives up to order {self.orders[pv.name] - 1}, not {pv.order}"
                    )
                if pv.side and j in (0, len(self.points) - 1):
                    inner = 1 if j == 0 else -1
                    if pv.side != inner:
                        raise ProblemError(
                            f"{where}: {_describe(pv.point)} is an end of the domain; there is no value from "
                            f"{'the left' if pv.side < 0 else 'the right'} there (write {pv.name}"
                            f"{chr(39) * pv.order}({_describe(pv.point)}))"
                        )
                elif pv.side:
                    jumps[j].add((pv.name, pv.order))
                elif 0 < j < len(self.points) - 1:
                    plain.append((where, pv, j))
        for where, pv, j in plain:
            if (pv.name, pv.order) in jumps[j]:
                shown = pv.name + "'" * pv.order
                raise ProblemError(
                    f"{where}: {shown}({_describe(pv.point)}) is ambiguous: {shown} jumps there (another "
                    f"condition takes its one-sided values); write {shown}({_describe(pv.point)}-) or "
                    f"{shown}({_describe(pv.point)}+)"
                )
        self._count(jumps)
        return jumps

    def _count(self, jumps: dict[int, set]) -> None:
        self_phase = self.phase = self._needs_phase()
        free = len(self.unknown_parameters)
        total = sum(self.orders.values())
        jumping = sum(len(s) for s in jumps.values())
        needed = total + free + jumping - self_phase
        if self._shifts():
            first = self.unknowns[0]
            more = ("" if len(self.conditions) < needed else
                    "; with it the count is one over: make a constant such as a front's speed an unknown parameter")
            raise ProblemError(
                f"the solution can be shifted along {self.independent} (the equations do not hold {self.independent} "
                f"and every condition is at -inf or inf); fix it with a condition such as {first}(0) = ... (a value "
                f"between those at the two ends){more}"
            )
        if len(self.conditions) == needed:
            return
        parts = [" + ".join(f"{self.orders[n]} for {n}" for n in self.unknowns)]
        if free:
            parts.append(f"{free} for unknown parameters")
        for j, states in sorted(jumps.items()):
            where = f"{self.independent} = {_describe(self.points[j])}"
            if states:
                names = ", ".join(n + "'" * k for n, k in sorted(states))
                parts.append(f"{len(states)} at {where}, where {names} jump{'s' if len(states) == 1 else ''}")
        text = " + ".join(parts)
        if self_phase:
            text += " - 1 phase condition bvpkit adds to this periodic problem"
        if self.eigenvalue:
            text += f"; the eigenvalue '{self.eigenvalue}' brings its own normalisation"
        interfaces = ""
        if len(self.points) > 2:
            held = ", ".join(_describe(p) for p in self.points[1:-1])
            interfaces = (f"; at the interface{'s' if len(self.points) > 3 else ''} {self.independent} = {held} every "
                          "state is continuous unless a condition takes its one-sided values (f(L-), f(L+)), and "
                          "each state that jumps needs one more condition")
        both = ""
        if all(self.infinite):
            both = "; on (-inf, inf) a second-order equation usually takes one condition at each end"
            if (len(self.conditions) == needed + 1 and len(self.points) > 2
                    and not any(self.x in _without_functions(eq).free_symbols for eq in self.equations)):
                both += ("; a front placed by a condition inside, such as u(0) = 1/2, needs its speed as an unknown "
                         "parameter")
        raise ProblemError(
            f"{len(self.conditions)} boundary condition(s) given, {needed} needed ({text}): the count must "
            f"equal the total differential order plus the number of unknown parameters{interfaces}{both}"
        )

    def _shifts(self) -> bool:
        """Whether every solution can be moved along the variable: both ends infinite, no point
        inside, no equation holding the variable, and no condition holding it (in an integral
        such as ``integral(x*u) = 0``, which would fix the position)."""
        if not all(self.infinite) or len(self.points) > 2:
            return False
        if any(self.x in _without_functions(eq).free_symbols for eq in self.equations):
            return False
        return not any(self.x in c.free_symbols for c in self.conditions)

    def _needs_phase(self) -> bool:
        """A periodic problem with an unknown period on autonomous equations needs a phase condition.

        Periodic means: an end of the domain is an unknown parameter and every condition is
        ``f^(j)(a) = f^(j)(b)`` for some state. Autonomous: no equation holds the
        independent variable. Then shifting a solution along the orbit gives another one,
        and bvpkit pins it with ``u'(a) = 0`` for the first unknown (see reduce.py).
        """
        ends_free = any(s.name in self.unknown_parameters for end in self.domain for s in end.free_symbols)
        if not ends_free or len(self.points) > 2 or not self.conditions:
            return False
        if any(self.x in _without_functions(eq).free_symbols for eq in self.equations):
            return False
        for c in self.conditions:
            points = self.point_values(c)
            if len(points) != 2 or c.has(_expr.DomainIntegral) or any(pv.side for pv in points):
                return False
            first, second = points
            ends = {self.which_point(first.point), self.which_point(second.point)}
            if (first.name, first.order) != (second.name, second.order) or ends != {0, 1}:
                return False
            # c = +-(value at one end - value at the other); no expand: it multiplies out powers of sums
            difference = first.node - second.node
            if c - difference != 0 and c + difference != 0:
                return False
        return True

    def _guesses(self, guess: Mapping[str, Any]) -> dict[str, sp.Expr]:
        result = {}
        allowed = {self.independent, *self._names}
        for name, value in guess.items():
            if name not in self.unknowns:
                raise ProblemError(f"guess for '{name}', which is not an unknown function{closest(name, self.unknowns)}")
            if isinstance(value, bool):
                raise ProblemError(f"guess for '{name}': expected an expression or number")
            if isinstance(value, int | float):
                e = sp.Float(_limits.check_value(value, f"guess for '{name}'"))
            elif isinstance(value, str):
                try:
                    e = _expr.parse(value, self.x)
                except ExpressionError as err:
                    raise ExpressionError(f"guess for '{name}': {err.reason}", err.text, err.column) from None
            elif isinstance(value, sp.Expr):
                e = value
            elif _is_solution(value):
                raise ProblemError(f"guess for '{name}': {_SOLUTION_AS_GUESS}")
            else:
                raise ProblemError(f"guess for '{name}': expected an expression, got {type(value).__name__}")
            for s in e.free_symbols:
                if s.name not in allowed:
                    raise ProblemError(f"guess for '{name}': unknown name '{s.name}'{closest(s.name, allowed)}")
            if e.has(applied_undef(), sp.Derivative, sp.Subs):
                raise ProblemError(f"guess for '{name}' may not use unknown functions")
            result[name] = e.xreplace(
                {s: (self.x if s.name == self.independent else sp.Symbol(s.name)) for s in e.free_symbols}
            )
        return result

    def _outputs(self, outputs: Mapping[str, str]) -> dict[str, str]:
        result = {}
        for name, text in outputs.items():
            _expr.check_name(name, "output")
            if not isinstance(text, str):
                raise ProblemError(f"output '{name}': expected an expression as text")
            self.parse_quantity(text, where=f"output '{name}'")
            result[name] = text
        return result

    def parse_quantity(self, text: str, where: str = "expression") -> sp.Expr:
        """Parse an expression of the solution (point values, states, integrals, constants)."""
        try:
            e = _expr.parse(text, self.x)
        except ExpressionError as err:
            raise ExpressionError(f"{where}: {err.reason}", err.text, err.column) from None
        e = self._canonical(e, where, text)
        for pv in self.point_values(e, f"{where} ({text})"):
            if pv.order > self.orders[pv.name]:
                raise ProblemError(
                    f"{where} ({text}): {pv.name} has order {self.orders[pv.name]}; derivatives up to "
                    f"that order can be evaluated, not {pv.order}"
                )
        for d in e.atoms(sp.Derivative):
            if d.expr.args == (self.x,) and d.derivative_count > self.orders[d.expr.func.__name__]:
                raise ProblemError(
                    f"{where} ({text}): derivative of order {d.derivative_count} is above the order of "
                    f"{d.expr.func.__name__} in the equations"
                )
        return e

    # -- identity and copies --------------------------------------------------------------
    @property
    def infinite(self) -> tuple[bool, bool]:
        """Whether each end of the domain is infinite."""
        return tuple(self.domain[i] in (sp.oo, -sp.oo) for i in range(2))  # type: ignore[return-value]

    def key(self, *, generated: bool = False) -> str:
        """A hash of the problem's structure: what it says, not the values of its constants or
        the guesses of its parameters (those change without new code). With ``generated``,
        also what else is turned into code: the guess expressions and the outputs."""
        # the parsed expressions, every number by its exact binary value (text printed by
        # SymPy shows 15 digits: 1.0 and 1.0000000000000049 alike)
        parts = [self.independent, self.unknowns, self.equations, self.conditions,
                 list(self.points), list(self.constants), list(self.unknown_parameters),
                 self.eigenvalue, self.mode,
                 [(r.equations, sorted(r.constants)) for r in self.regions]]
        if generated:
            parts += [sorted(self.guess.items()), sorted(self.outputs.items())]
        return exact_key(parts)

    @property
    def point_labels(self) -> list[str]:
        """The ends and interfaces as written (for messages)."""
        return [_describe(p) for p in self.points]

    def with_constants(self, **values: float) -> Problem:
        """A copy of this problem with some constants changed (checked like values in the file:
        the domain's ends and interfaces must stay in order)."""
        missing = [k for k in values if k not in self.constants]
        if missing:
            raise ProblemError(
                f"'{missing[0]}' is not a constant of this problem{closest(missing[0], self.constants)}"
            )
        new = object.__new__(Problem)
        new.__dict__.update(self.__dict__)
        new.__dict__["constants"] = {**self.constants, **_numbers(values, "constant", names_known=True)}
        new._check_order(list(self.points), [_describe(p) for p in self.points])
        return new

    def __repr__(self) -> str:
        eqs = "; ".join(self.equation_text)
        bcs = "; ".join(self.condition_text)
        a, b = (_describe(e) for e in self.domain)
        return f"Problem({eqs} | {bcs} | {self.independent} in ({a}, {b}))"


def point_value(point: Any, values: Mapping[str, float], what: str = "") -> float:
    """The number a point expression stands for, given the values of its names (checked:
    a real number of floating-point size, or an infinite end); ``what`` names it in errors."""
    if not isinstance(point, sp.Basic):  # parsed by Problem._point; text never reaches SymPy here
        raise TypeError(f"a point must be a parsed expression, got {type(point).__name__}")
    value = point.xreplace({sp.Symbol(k): sp.Float(v) for k, v in values.items()})
    if value == sp.oo:
        return math.inf
    if value == -sp.oo:
        return -math.inf
    what = what or f"the point {_limits.describe(point)}"
    if value.free_symbols:
        raise ProblemError(f"{what} is not a number")
    return _limits.check_end(value, what)


#: Smallest length of a region relative to the domain's size: below it the mapping of the
#: region onto the unit interval multiplies the equations by almost nothing.
_SMALLEST_REGION = 1e-12


def check_positions(values: Sequence[float], labels: Sequence[str], independent: str = "x") -> None:
    """The one check of domain ends and interfaces, whatever their origin (the problem's text,
    ``with_constants``, ``--set``, a prepared problem's compiled ends): strictly increasing,
    finite inside, and no region of zero length."""
    for value, label in zip(values[1:-1], labels[1:-1]):
        if not math.isfinite(value):
            raise ProblemError(f"the interface {independent} = {label} is not a finite number (got {value!r})")
    for value, label in ((values[0], labels[0]), (values[-1], labels[-1])):
        if math.isnan(value):
            raise ProblemError(f"the domain end {label} is not a number")
    if values[0] == math.inf or values[-1] == -math.inf:
        raise ProblemError(f"the domain ({labels[0]}, {labels[-1]}) must have a < b (got {values[0]:g} and {values[-1]:g})")
    finite = [v for v in values if math.isfinite(v)]
    scale = max([1.0, *(abs(v) for v in finite)])
    labels = [_plain_number(label, value) for label, value in zip(labels, values)]
    a, b = values[0], values[-1]
    if len(values) > 2 and a < b:
        for value, label in zip(values[1:-1], labels[1:-1]):
            if not a < value < b:
                shown = label if label == f"{value:g}" else f"{label} (= {value:g})"
                domain = f"[{labels[0]}, {labels[-1]}]"
                if domain != f"[{a:g}, {b:g}]":
                    domain += f" = [{a:g}, {b:g}]"
                end = labels[0] if value == a else labels[-1]
                why = (f"on an end of the domain {domain}: write a condition there at the end itself ({end})"
                       if value in (a, b) else f"outside the domain {domain}")
                raise ProblemError(
                    f"the point {independent} = {shown}, where a condition takes a value (or a region ends), lies {why}"
                )
    for (u, lu), (v, lv) in zip(zip(values, labels), zip(values[1:], labels[1:])):
        if not u < v or (math.isfinite(u) and math.isfinite(v) and v - u <= _SMALLEST_REGION * scale):
            if len(values) == 2:
                raise ProblemError(f"domain ({lu}, {lv}) must have a < b (got {u:g} and {v:g})")
            raise ProblemError(
                f"the points {independent} = {lu} and {independent} = {lv} must be in increasing order with room "
                f"between them (got {u:g} and {v:g}); ends and interfaces: {', '.join(labels)}"
            )


def _plain_number(label: str, value: float) -> str:
    """A point's label as written, but a number as a person writes it (1.5, not 1.50000000000000)."""
    try:
        return f"{value:g}" if float(label) == value else label
    except ValueError:
        return label


def _without_functions(e: sp.Expr) -> sp.Expr:
    """``e`` with every unknown function and derivative replaced by a plain symbol."""
    nodes = e.atoms(sp.Derivative) | e.atoms(applied_undef())
    return e.xreplace({node: sp.Dummy() for node in nodes})


def _list(items: Any, what: str) -> list:
    if isinstance(items, str | sp.Basic) or not isinstance(items, Iterable):
        raise ProblemError(f"{what} must be a list, got {type(items).__name__}")
    return list(items)


def _numbers(values: Mapping[str, Any], role: str, names_known: bool = False) -> dict[str, float]:
    if not isinstance(values, Mapping):
        raise ProblemError(f"{role}s must be a mapping of name to number")
    result = {}
    for name, value in values.items():
        if not names_known:
            _expr.check_name(name, role)
        result[name] = _limits.check_value(value, f"{role} '{name}'")  # finite, within 1e-300..1e300
    return result


__all__ = ["Problem", "PointValue", "Region", "check_positions", "point_value"]
