"""``Problem``: a boundary-value problem as written on paper, validated once.

A ``Problem`` holds SymPy expressions only; it does no number crunching. Unknown
functions are ``Function(name)(x)``, derivatives are ``Derivative``, point values at the
ends are ``f(0)`` or ``Subs(Derivative(f(x), x), x, oo)``.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from . import limits as _limits
from ._lazy import LazyModule, applied_undef
from .errors import BvpkitError, ExpressionError, ProblemError, closest

sp = LazyModule("sympy")  # imported when a problem is first built from text, not for a cached one
_expr = LazyModule("bvpkit.expr")

Text = Any  # a string, or a SymPy expression


def _describe(item: Text) -> str:
    return item if isinstance(item, str) else sp.sstr(item)


class Problem:
    """A two-point boundary-value problem for ordinary differential equations.

    Parameters
    ----------
    equations : sequence of str or SymPy Eq/Expr
        The differential equations as on paper, e.g. ``"f''' + f*f''/2 = 0"``. A SymPy
        ``Expr`` means ``expr = 0``.
    conditions : sequence of str or SymPy Eq/Expr
        Boundary conditions at the ends of the domain, e.g. ``"f'(inf) = 1"``.
    domain : (a, b)
        Ends of the interval: numbers, ``"inf"``/``"-inf"``/``sympy.oo``, or an expression
        of constants (``"L"``, ``"pi/2"``).
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
    ):
        # The arguments as given: plain, picklable data from which a worker process (or a
        # cluster node) rebuilds this problem; see bvpkit.sweep.
        self.arguments = dict(
            equations=equations, conditions=conditions, domain=domain, independent=independent,
            unknowns=unknowns, constants=dict(constants or {}), unknown_parameters=dict(unknown_parameters or {}),
            guess=dict(guess or {}), outputs=dict(outputs or {}), settings=dict(settings or {}), title=title,
            eigenvalue=eigenvalue, mode=mode,
        )
        self.title = str(title)
        self.independent = _expr.check_name(independent, "independent variable")
        self.x = sp.Symbol(self.independent)
        self.constants = _numbers(constants or {}, "constant")
        self.unknown_parameters = _numbers(unknown_parameters or {}, "unknown parameter")
        self.settings = dict(settings or {})
        overlap = set(self.constants) & set(self.unknown_parameters)
        if overlap:
            raise ProblemError(
                f"'{sorted(overlap)[0]}' is both a constant and an unknown parameter"
            )
        if self.independent in self.constants or self.independent in self.unknown_parameters:
            raise ProblemError(f"'{self.independent}' is the independent variable and a constant")
        self.eigenvalue = None
        self.mode = None
        if eigenvalue is not None:
            _expr.check_name(eigenvalue, "eigenvalue")
            if eigenvalue in self.constants or eigenvalue in self.unknown_parameters:
                raise ProblemError(
                    f"eigenvalue '{eigenvalue}' must not also be a constant or unknown parameter"
                )
            self.eigenvalue = eigenvalue
            self.unknown_parameters[eigenvalue] = 0.0  # its guess comes from a discrete eigenproblem
            self.mode = 1 if mode is None else mode
            if isinstance(self.mode, bool) or not isinstance(self.mode, int) or not 1 <= self.mode <= 1000:
                raise ProblemError(f"mode must be a whole number from 1 to 1000, got {mode!r}")
        elif mode is not None:
            raise ProblemError("mode is given but no eigenvalue: name it with eigenvalue=\"...\"")

        if isinstance(equations, str | sp.Basic):
            equations = [equations]
        self.equation_text = [_describe(e) for e in _list(equations, "equations")]
        self.condition_text = [_describe(c) for c in _list(conditions, "conditions")]
        raw_equations = [self._read(e, f"equation {i + 1}") for i, e in enumerate(equations)]
        raw_conditions = [self._read(c, f"condition {i + 1}") for i, c in enumerate(conditions)]

        self.unknowns = self._infer_unknowns(raw_equations, unknowns)
        self.equations = [
            self._canonical(e, f"equation {i + 1}", self.equation_text[i])
            for i, e in enumerate(raw_equations)
        ]
        self.orders = self._orders()
        self.domain = self._domain(domain)
        self.conditions = [
            self._canonical(c, f"condition {i + 1}", self.condition_text[i])
            for i, c in enumerate(raw_conditions)
        ]
        self._check_conditions()
        self.guess = self._guesses(guess or {})
        self.outputs = self._outputs(outputs or {})
        # The reduction validates what only it can see (isolating the highest derivatives),
        # so a Problem that constructs is a Problem that can be solved.
        from .reduce import reduce

        self.system = reduce(self)

    # -- reading ------------------------------------------------------------------------
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
        raise ProblemError(
            f"{where}: expected a string or a SymPy expression, got {type(item).__name__}"
        )

    def _infer_unknowns(self, equations: list[sp.Expr], given: Sequence[str] | None) -> list[str]:
        found: list[str] = []
        for eq in equations:
            for f in sorted(eq.atoms(applied_undef()), key=sp.default_sort_key):
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
                    f"'{extra[0]}' is used as a function in the equations but is not among "
                    f"the unknowns {names}"
                )
        if not names:
            raise ProblemError(
                "no unknown function found: write derivatives with primes, e.g. \"y'' + y = 0\""
            )
        for n in names:
            _expr.check_name(n, "unknown function")
            if n == self.independent or n in self.constants or n in self.unknown_parameters:
                raise ProblemError(f"'{n}' is an unknown function and also another kind of name")
        return names

    def _canonical(self, e: sp.Expr, where: str, text: str) -> sp.Expr:
        """Map free names onto the problem's own symbols and functions; check every name."""
        replace: dict[sp.Basic, sp.Basic] = {}
        known = [self.independent, *self.constants, *self.unknown_parameters, *self.unknowns]
        for s in e.free_symbols:
            if s.name == self.independent:
                replace[s] = self.x
            elif s.name in self.unknowns:
                replace[s] = sp.Function(s.name)(self.x)
            elif s.name in self.constants or s.name in self.unknown_parameters:
                replace[s] = sp.Symbol(s.name)
            else:
                raise ProblemError(f"{where} ({text}): unknown name '{s.name}'{closest(s.name, known)}")
        for f in e.atoms(applied_undef()):
            name = f.func.__name__
            if name not in self.unknowns:
                raise ProblemError(
                    f"{where} ({text}): '{name}' is not an unknown function"
                    f"{closest(name, self.unknowns)}"
                )
        e = e.xreplace(replace) if replace else e
        # A point value's derivative is bound by its Subs (SymPy may share that node
        # between problems with other variable names); point_values() checks those.
        bound = {d for s in e.atoms(sp.Subs) for d in s.expr.atoms(sp.Derivative)}
        for d in e.atoms(sp.Derivative) - bound:
            if len(d.variables) and any(v != self.x for v in d.variables):
                raise ProblemError(
                    f"{where} ({text}): derivatives must be taken with respect to "
                    f"'{self.independent}'"
                )
            if not isinstance(d.expr, applied_undef()):
                raise ProblemError(f"{where} ({text}): write derivatives of unknown functions only")
        return e

    def _orders(self) -> dict[str, int]:
        orders = {n: 0 for n in self.unknowns}
        if len(self.equations) != len(self.unknowns):
            raise ProblemError(
                f"{len(self.equations)} equation(s) for {len(self.unknowns)} unknown "
                f"function(s) {self.unknowns}: give one differential equation per unknown"
            )
        for eq in self.equations:
            for d in eq.atoms(sp.Derivative):
                name = d.expr.func.__name__
                if d.expr.args != (self.x,):
                    continue  # a point value inside an equation; checked below
                orders[name] = max(orders[name], d.derivative_count)
            for f in eq.atoms(applied_undef()):
                if f.args != (self.x,):
                    raise ProblemError(
                        f"equation point values such as {f} are not supported; "
                        "introduce an unknown parameter instead"
                    )
            if eq.has(_expr.DomainIntegral):
                raise ProblemError(
                    "integral(...) may appear in conditions only; for an integral inside an "
                    "equation introduce a new unknown function"
                )
            if eq.atoms(sp.Subs):
                raise ProblemError(
                    "equation point values such as f'(0) are not supported; "
                    "introduce an unknown parameter instead"
                )
        for name, order in orders.items():
            if order == 0:
                raise ProblemError(
                    f"'{name}' appears without derivatives: every unknown function needs a "
                    "derivative in the equations (algebraic unknowns are not supported)"
                )
        return {name: int(order) for name, order in orders.items()}  # plain ints, not SymPy's

    def _domain(self, domain: Sequence[Any]) -> tuple[sp.Expr, sp.Expr]:
        if isinstance(domain, str) or not isinstance(domain, Sequence | tuple) or len(domain) != 2:
            raise ProblemError(f"domain must be a pair (a, b), got {domain!r}")
        ends = []
        allowed = set(self.constants) | set(self.unknown_parameters)
        for end in domain:
            if isinstance(end, bool):
                raise ProblemError(f"domain end {end!r} is not a number")
            if isinstance(end, int | float):
                _limits.check_end(end, "domain end")  # NaN, or beyond the float range
                value = sp.oo if end == math.inf else -sp.oo if end == -math.inf else sp.Float(end)
                if isinstance(end, int):
                    value = sp.Integer(end)
            elif isinstance(end, str):
                try:
                    value = _expr.parse(end, self.x)
                except ExpressionError as err:
                    raise ExpressionError(f"domain end: {err.reason}", err.text, err.column) from None
            elif isinstance(end, sp.Expr):
                value = end
            else:
                raise ProblemError(f"domain end {end!r}: expected a number, 'inf' or a name")
            bad = [s.name for s in value.free_symbols if s.name not in allowed]
            if bad:
                raise ProblemError(
                    f"domain end '{end}': unknown name '{bad[0]}' (a domain end may use "
                    f"constants and unknown parameters){closest(bad[0], allowed)}"
                )
            if value.has(applied_undef(), sp.Derivative, sp.Subs):
                raise ProblemError(f"domain end '{end}' may not use unknown functions")
            ends.append(value.xreplace({s: sp.Symbol(s.name) for s in value.free_symbols}))
        a, b = ends
        a_value, b_value = (self.end_value(e) for e in ends)
        if not a_value < b_value:
            raise ProblemError(
                f"domain ({_describe(domain[0])}, {_describe(domain[1])}) must have a < b "
                f"(got {a_value:g} and {b_value:g})"
            )
        return a, b

    def end_value(self, end: sp.Expr) -> float:
        """The value of a domain end (constants and parameter guesses substituted)."""
        values = {sp.Symbol(k): v for k, v in {**self.constants, **self.unknown_parameters}.items()}
        value = end.xreplace(values)
        if value == sp.oo:
            return math.inf
        if value == -sp.oo:
            return -math.inf
        return _limits.check_end(value, f"domain end {_limits.describe(end)}")  # a real number in range

    # -- conditions -----------------------------------------------------------------------
    def point_values(self, e: sp.Expr) -> list[tuple[sp.Basic, str, int, sp.Expr]]:
        """Every point value in ``e``: (the SymPy node, function name, derivative order, point)."""
        found = []
        for s in e.atoms(sp.Subs):
            d = s.expr
            if not isinstance(d, sp.Derivative) or not isinstance(d.expr, applied_undef()):
                raise ProblemError(f"cannot read the point value {s}")
            (v,) = s.variables if len(s.variables) == 1 else (None,)
            if v is None or d.expr.args != (v,) or any(w != v for w in d.variables):
                raise ProblemError(f"cannot read the point value {s}")
            found.append((s, d.expr.func.__name__, d.derivative_count, s.point[0]))
        # Functions inside a Subs are bound by it (and SymPy's cache may hand back a Subs
        # built for another variable name): only free applications are point values.
        bound = {f for s in e.atoms(sp.Subs) for f in s.expr.atoms(applied_undef())}
        for f in e.atoms(applied_undef()) - bound:
            if f.args != (self.x,):
                found.append((f, f.func.__name__, 0, f.args[0]))
        return found

    def which_end(self, point: sp.Expr) -> int | None:
        """0 for the left end, 1 for the right end, None if ``point`` is neither."""
        try:
            value = self.end_value(point)
        except ProblemError:
            return None
        for i, end in enumerate(self.domain):
            end_value = self.end_value(end)
            if value == end_value or (
                math.isfinite(value) and abs(value - end_value) <= 1e-12 * max(1.0, abs(value))
            ):
                return i
        return None

    def _check_conditions(self) -> None:
        for i, c in enumerate(self.conditions):
            where = f"condition {i + 1} ({self.condition_text[i]})"
            integrals = c.atoms(_expr.DomainIntegral)
            outside = c.xreplace({g: sp.Symbol("_integral") for g in integrals})
            if self.x in outside.free_symbols:
                raise ProblemError(
                    f"{where}: a condition holds at an end of the domain; write point values "
                    f"such as f(0) or f'(inf), not '{self.independent}' or bare functions"
                )
            for g in integrals:
                if self.point_values(g.args[0]):
                    raise ProblemError(f"{where}: an integrand may not hold point values such as f(0)")
                if any(isinstance(d, sp.Derivative) and d.derivative_count >= self.orders[d.expr.func.__name__]
                       for d in g.args[0].atoms(sp.Derivative)):
                    raise ProblemError(f"{where}: an integrand may use derivatives below each function's order")
            points = self.point_values(outside)
            if not points and not integrals:
                raise ProblemError(f"{where}: names no point value such as f(0)")
            for _, name, k, point in points:
                if self.which_end(point) is None:
                    ends = ", ".join(_describe(e) for e in self.domain)
                    raise ProblemError(
                        f"{where}: the point {point} is not an end of the domain ({ends}); "
                        "interior conditions are not supported"
                    )
                if k >= self.orders[name]:
                    raise ProblemError(
                        f"{where}: {name} has order {self.orders[name]} in the equations, so a "
                        f"condition may use its derivatives up to order {self.orders[name] - 1}, "
                        f"not {k}"
                    )
        self.phase = self._needs_phase()
        free_parameters = len(self.unknown_parameters) - (self.eigenvalue is not None)
        needed = sum(self.orders.values()) + free_parameters - self.phase
        if len(self.conditions) != needed:
            parts = " + ".join(f"{self.orders[n]} for {n}" for n in self.unknowns)
            if free_parameters:
                parts += f" + {free_parameters} for unknown parameters"
            if self.phase:
                parts += " - 1 phase condition bvpkit adds to this periodic problem"
            if self.eigenvalue:
                parts += f"; the eigenvalue '{self.eigenvalue}' brings its own normalisation"
            raise ProblemError(
                f"{len(self.conditions)} boundary condition(s) given, {needed} needed "
                f"({parts}): the count must equal the total differential order plus the "
                "number of unknown parameters"
            )

    def _needs_phase(self) -> bool:
        """A periodic problem with an unknown period on autonomous equations needs a phase condition.

        Periodic means: an end of the domain is an unknown parameter and every condition is
        ``f^(j)(a) = f^(j)(b)`` for some state. Autonomous: no equation holds the
        independent variable. Then shifting a solution along the orbit gives another one,
        and bvpkit pins it with ``u'(a) = 0`` for the first unknown (see reduce.py).
        """
        ends_free = any(
            s.name in self.unknown_parameters for end in self.domain for s in end.free_symbols
        )
        if not ends_free or any(self.x in _without_functions(eq).free_symbols for eq in self.equations):
            return False
        if not self.conditions:
            return False
        for c in self.conditions:
            points = self.point_values(c)
            if len(points) != 2 or c.has(_expr.DomainIntegral):
                return False
            (n1, f1, k1, p1), (n2, f2, k2, p2) = points
            ends = {self.which_end(p1), self.which_end(p2)}
            if (f1, k1) != (f2, k2) or ends != {0, 1}:
                return False
            if c - (n1 - n2) != 0 and c + (n1 - n2) != 0:  # no expand: it multiplies out powers of sums
                return False
        return True

    def _guesses(self, guess: Mapping[str, Any]) -> dict[str, sp.Expr]:
        result = {}
        allowed = {self.independent, *self.constants, *self.unknown_parameters}
        for name, value in guess.items():
            if name not in self.unknowns:
                raise ProblemError(
                    f"guess for '{name}', which is not an unknown function{closest(name, self.unknowns)}"
                )
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
            else:
                raise ProblemError(f"guess for '{name}': expected an expression, got {type(value).__name__}")
            for s in e.free_symbols:
                if s.name not in allowed:
                    raise ProblemError(
                        f"guess for '{name}': unknown name '{s.name}'{closest(s.name, allowed)}"
                    )
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
        """Parse an expression of the solution (point values, states, constants) and check its names."""
        try:
            e = _expr.parse(text, self.x)
        except ExpressionError as err:
            raise ExpressionError(f"{where}: {err.reason}", err.text, err.column) from None
        e = self._canonical(e, where, text)
        for _, name, k, point in self.point_values(e):
            if k > self.orders[name]:
                raise ProblemError(
                    f"{where} ({text}): {name} has order {self.orders[name]}; derivatives up to "
                    f"that order can be evaluated, not {k}"
                )
        for d in e.atoms(sp.Derivative):
            if d.expr.args == (self.x,) and d.derivative_count > self.orders[d.expr.func.__name__]:
                raise ProblemError(
                    f"{where} ({text}): derivative of order {d.derivative_count} is above the "
                    f"order of {d.expr.func.__name__} in the equations"
                )
        return e

    # -- helpers ------------------------------------------------------------------------
    @property
    def infinite(self) -> tuple[bool, bool]:
        """Whether each end of the domain is infinite."""
        cached = self.__dict__.get("_infinite")
        if cached is None:
            cached = tuple(self.domain[i] in (sp.oo, -sp.oo) for i in range(2))
            self.__dict__["_infinite"] = cached
        return cached  # type: ignore[return-value]

    def ends(self) -> tuple[float, float]:
        """Both ends of the domain as numbers (constants and parameter guesses substituted)."""
        cached = self.__dict__.get("_ends")
        if cached is None:
            if self.__dict__.get("_symbolic", True):
                cached = tuple(self.end_value(e) for e in self.domain)
            else:  # rebuilt from plain data: the compiled domain ends, no SymPy
                import numpy as np

                compiled = self.compiled()
                layout = compiled.layout
                p = np.array([self.unknown_parameters[q] for q in layout.parameters], dtype=float)
                k = np.array([self.constants[c] for c in layout.constants], dtype=float)
                finite = compiled.domain_ends(p, k)
                cached = tuple(float(v) if not inf else (-math.inf, math.inf)[i]
                               for i, (v, inf) in enumerate(zip(finite, self.infinite)))
            self.__dict__["_ends"] = cached
        return cached  # type: ignore[return-value]

    def compiled(self):  # noqa: ANN201 - a bvpkit.compiled.CompiledSystem
        """The compiled system; a problem rebuilt from the cache takes it from there."""
        layout = self.__dict__.get("_layout")
        if layout is not None and not self.__dict__.get("_symbolic", True):
            from .compiled import load_compiled

            found = load_compiled(layout)
            if found is not None:
                return found
        from .codegen import compile_system

        return compile_system(self.system)

    # -- a problem rebuilt from the cache (see prepared.py) --------------------------------
    _PLAIN = ("arguments", "title", "independent", "constants", "unknown_parameters", "settings", "eigenvalue",
              "mode", "equation_text", "condition_text", "unknowns", "orders", "outputs")

    def plain(self) -> dict[str, Any]:
        """The facts a solve needs, as plain data (JSON-ready when the arguments are text)."""
        data = {name: getattr(self, name) for name in self._PLAIN}
        data["orders"] = {name: int(order) for name, order in self.orders.items()}
        data["infinite"] = list(self.infinite)
        data["ends"] = list(self.ends())
        data["layout"] = self.system.state_layout().as_dict()
        from .guess import guess_recipes

        data["recipes"] = [r.plain() for r in guess_recipes(self, self.compiled()).values()]
        return data

    @classmethod
    def from_plain(cls, data: Mapping[str, Any], starts: Mapping[str, Any] | None = None) -> Problem:
        """A problem from :meth:`plain` data, without SymPy: its symbolic parts (equations,
        domain, reduced system) are built from ``arguments`` when first asked for."""
        from .layout import StateLayout

        new = object.__new__(cls)
        d = new.__dict__
        d.update({name: data[name] for name in cls._PLAIN})
        d["orders"] = {str(k): int(v) for k, v in data["orders"].items()}
        d["_infinite"] = tuple(bool(v) for v in data["infinite"])
        d["_ends"] = tuple(float(v) for v in data["ends"])
        d["_layout"] = StateLayout.from_dict(data["layout"])
        d["_starts"] = dict(starts or {})
        if "recipes" in data:
            from .guess import GuessRecipe

            d["_recipes"] = {r["name"]: GuessRecipe.from_plain(r) for r in data["recipes"]}
        d["_symbolic"] = False
        return new

    def __getattr__(self, name: str):  # noqa: ANN204
        # Only called for attributes not set: those of a problem rebuilt by from_plain,
        # which builds its symbolic parts now (importing SymPy) from its arguments.
        d = self.__dict__
        if name.startswith("__") or d.get("_symbolic", True):
            raise AttributeError(name)
        full = Problem(**d["arguments"])
        if full.constants != d["constants"]:
            full = full.with_constants(**{k: v for k, v in d["constants"].items() if k in full.constants})
        for key, value in full.__dict__.items():
            d.setdefault(key, value)
        d["_symbolic"] = True
        return getattr(self, name)

    def with_constants(self, **values: float) -> Problem:
        """A copy of this problem with some constants changed (no re-validation of text)."""
        new = object.__new__(Problem)
        new.__dict__.update(self.__dict__)
        missing = [k for k in values if k not in self.constants]
        if missing:
            raise ProblemError(
                f"'{missing[0]}' is not a constant of this problem{closest(missing[0], self.constants)}"
            )
        new.constants = {**self.constants, **_numbers(values, "constant", names_known=True)}
        new.__dict__.pop("_ends", None)  # a domain end may be one of the constants
        return new

    def _freed(self, name: str):  # noqa: ANN202 - a FirstOrderSystem
        """The reduced system with the constant ``name`` turned into an unknown parameter.

        It has one condition fewer than unknowns: continuation adds the arclength equation.
        """
        from .reduce import reduce

        copy = object.__new__(Problem)
        copy.__dict__.update(self.__dict__)
        copy.constants = {k: v for k, v in self.constants.items() if k != name}
        copy.unknown_parameters = {**self.unknown_parameters, name: self.constants[name]}
        return reduce(copy)

    def __repr__(self) -> str:
        eqs = "; ".join(self.equation_text)
        bcs = "; ".join(self.condition_text)
        a, b = (_describe(e) for e in self.domain)
        return f"Problem({eqs} | {bcs} | {self.independent} in ({a}, {b}))"


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


__all__ = ["Problem", "BvpkitError"]
