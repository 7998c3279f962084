"""Complex values: every complex number of a problem onto its real and imaginary parts.

A problem is complex when its equations or conditions hold the imaginary unit (``1j``), or a
constant or an unknown parameter's start value is a complex number (by its type: ``1+2j``,
``complex(3, 0)``); :class:`bvpkit.Problem` decides, and says it in ``problem.complex``.
Then every unknown function is complex, and so is every state the reduction adds (an
integral of a complex integrand); constants and unknown parameters are complex when their
value (start value) is, real otherwise, so continuation in a real constant runs as in any
problem, and a pair of real unknown parameters may take the place of a complex one (a
neutral eigenvalue ``c`` with a real wavenumber ``alpha`` as the second unknown).

The class is one rewrite of the finished reduction (:meth:`Complex.split`, after every other
class's hooks): each complex state ``z`` becomes two real states ``re(z)``, ``im(z)``, each
complex constant or parameter ``w`` the two real ones ``re(w)``, ``im(w)``, and every equation
and condition its real and imaginary parts. SymPy then differentiates the real system, so the
Jacobians are exact, and the Cauchy-Riemann structure of analytic terms comes out by itself.
The states of a region are the real parts of the user states, their imaginary parts, then
those of the added states; ``re(w)`` keeps the index ``w`` had, ``im(w)`` is added at the end.

Meaning of the functions for complex arguments (the principal branch, as Python's ``cmath``):

* ``sqrt(z)`` and ``z**r`` (``r`` not whole): ``|z|**r (cos(r theta) + i sin(r theta))`` with
  ``theta = arg(z)`` in ``(-pi, pi]``; ``log(z) = log|z| + i arg(z)``; ``z**w = exp(w log z)``;
* ``exp``, ``sin``, ``cos``, ``tan``, ``sinh``, ``cosh``, ``tanh``: the analytic functions;
* ``abs(z) = sqrt(re(z)**2 + im(z)**2)``, ``re``, ``im``, ``conj``, ``arg``: real-valued (not
  analytic; their Jacobians are still exact);
* ``asin acos atan asinh acosh atanh atan2 erf erfc`` and the comparisons ``min``, ``max``
  take real arguments only: a complex argument is refused, naming the item.

A condition must be complex-valued (two real conditions); one that is real by construction
(``abs(T(0)) = 1``, ``re(T(0)) = 1``) is refused, naming it. ``eigenvalue=`` is refused for a
complex problem (its guess counts the interior zeros of real modes): an eigenvalue is written
as an unknown parameter with a complex start value and a normalisation condition
(``phi''(-1) = 1``, or ``integral(phi**2) = 1``, not conjugated, which fixes scale and phase).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from .._lazy import LazyModule
from ..errors import ProblemError
from ..language import limits
from ..language.budget import budget, check_sizes
from .transform import Transform, register

sp = LazyModule("sympy")
_form = LazyModule("bvpkit.reduce.form")  # SymPy's work: loaded only when a problem is reduced


def part_names(name: str) -> tuple[str, str]:
    """The names of the real and imaginary parts of a complex ``name``: ``re(T)``, ``im(T)``."""
    return f"re({name})", f"im({name})"


@register
@dataclass(frozen=True)
class Complex(Transform):
    """The complex functions, constants and parameters of a problem (by name), each solved as
    its real and imaginary parts."""

    kind = "complex"
    real_values = False
    functions: tuple[str, ...] = ()
    constant_names: tuple[str, ...] = ()  # the complex constants (a region's own: name@r)
    parameter_names: tuple[str, ...] = ()  # the complex unknown parameters

    # -- symbolic -------------------------------------------------------------------------
    @classmethod
    def applies(cls, problem) -> bool:  # noqa: ANN001
        return bool(getattr(problem, "complex", False))

    @classmethod
    def names(cls, problem, names) -> None:  # noqa: ANN001
        """Refusals that need the whole problem: an eigenvalue, a periodic orbit, algebraic
        equations (their inner solves work on real values)."""
        if getattr(problem, "algebraic", ()):
            raise ProblemError(
                f"algebraic unknowns ({', '.join(problem.algebraic)}) in a complex problem are not supported: "
                "write each as its real and imaginary parts (two real unknowns and two real equations)"
            )
        if problem.eigenvalue is not None:
            raise ProblemError(
                f"eigenvalue '{problem.eigenvalue}' in a complex problem: the eigenvalue guess counts the interior "
                f"zeros of real modes, which complex modes do not have; write '{problem.eigenvalue}' as an unknown "
                f"parameter with a complex start value (unknown_parameters={{'{problem.eigenvalue}': 0.5+0.1j}}) and "
                "add a normalisation condition, such as y'(0) = 1 or integral(y**2) = 1 (not conjugated: it fixes "
                "the scale and the phase)"
            )
        if problem.phase:
            raise ProblemError("a periodic orbit with an unknown period in a complex problem is not supported; "
                               "write the orbit's real and imaginary parts as real functions")

    @classmethod
    def split(cls, work) -> None:  # noqa: ANN001
        problem, names = work.problem, work.names
        complex_names = [n for n, v in {**problem.constants, **problem.unknown_parameters}.items()
                         if limits.is_complex(v)]
        # the symbols the reduction used (no real assumption: Transform.real_values) -> their
        # real and imaginary parts; every other symbol is real
        table: dict = {}
        symbols = {**{(n, True): k for n, k in ((s.name, k) for s, k in names.k.items())},
                   **{(n, False): p for n, p in ((s.name, p) for s, p in names.p.items())}}
        for r, own in enumerate(names.own):
            symbols.update({(f"{s.name}@{r + 1}", True): k for s, k in own.items()})
        for items, prefix, constant in ((names.constants, "k", True), (names.parameters, "p", False)):
            for i, name in enumerate(list(items)):
                if (name.split("@")[0] if constant else name) not in complex_names:
                    continue
                items[i], im_name = part_names(name)
                items.append(im_name)
                table[symbols[(name, constant)]] = (sp.Symbol(f"_{prefix}{i}", real=True),
                                                    sp.Symbol(f"_{prefix}{len(items) - 1}", real=True))
        # states: the real parts of the user states, their imaginary parts, then the added ones'
        users, states = len(work.user_states), list(work.states)
        order = ([(i, 0) for i in range(users)] + [(i, 1) for i in range(users)]
                 + [(i, 0) for i in range(users, len(states))] + [(i, 1) for i in range(users, len(states))])
        where = {pair: new for new, pair in enumerate(order)}
        local = _form._symbols("s", len(order))
        for i in range(len(states)):
            table[work.local[i]] = (local[where[(i, 0)]], local[where[(i, 1)]])
        old_values, work.values, work.real = dict(work.values), {}, True
        for (state, point, side), symbol in old_values.items():
            table[symbol] = (work.value(where[(state, 0)], point, side), work.value(where[(state, 1)], point, side))
        # the rows of the first-order system: state i's is the equation for its derivative
        described = [_written(name, k + 1) for name, k in states[:users]] + [f"the slope of {name}"
                                                                             for name, _ in states[users:]]
        with budget("splitting the equations into real and imaginary parts",
                    advice="write the equations with fewer products of complex terms"):
            systems = []
            for system in work.systems:
                parts = [split(f, table, f"the equation for {described[i]}") for i, f in enumerate(system)]
                systems.append([parts[i][part] for i, part in order])
            conditions = []
            texts = problem.condition_text
            for j, (c, kind) in enumerate(work.conditions):
                about = f"condition {j + 1} ({texts[j]})" if kind == "given" and j < len(texts) else f"a {kind} condition"
                re_part, im_part = split(c, table, about)
                if im_part == 0 and kind == "given":
                    raise ProblemError(
                        f"{about} is real-valued; in a complex problem each condition holds for a complex number "
                        "(its real and imaginary parts are two real conditions): write it for a complex value, "
                        "such as T(0) = 1 rather than abs(T(0)) = 1 or re(T(0)) = 1"
                    )
                conditions += [(re_part, kind), (im_part, kind)]
            given = [part for c in work.given for part in split(c, table, "a condition")]
            singular = _blocks(work.singular, table, order, where) if work.singular is not None else None
            maps = [None if m is None else tuple(_real(v, table, "a domain end") for v in m) for m in work.maps]
            points = tuple(_real(v, table, "a domain end") for v in work.points)
        check_sizes({f"the {('real', 'imaginary')[part]} part of the equation for {described[i]}": systems[0][n]
                     for n, (i, part) in enumerate(order)}, step="splitting into real and imaginary parts")
        work.systems, work.conditions, work.given, work.singular = systems, conditions, given, singular
        work.maps, work.points, work.local = maps, points, local
        work.states = [(part_names(states[i][0])[part], states[i][1]) for i, part in order]
        work.user_states = work.states[: 2 * users]
        work.functions = [(part_names(f)[part], n) for part in (0, 1) for f, n in work.functions]
        work.scratch[cls.kind] = tuple(complex_names)

    @classmethod
    def finish(cls, work) -> Complex:  # noqa: ANN001
        problem = work.problem
        chosen = set(work.scratch[cls.kind])
        constants = [n for n in problem.constants if n in chosen]
        constants += [f"{n}@{r + 1}" for r, region in enumerate(problem.regions) for n in region.constants
                      if n in chosen]
        return cls(tuple(problem.unknowns), tuple(constants), tuple(n for n in problem.unknown_parameters if n in chosen))

    @classmethod
    def read(cls, fields) -> Complex:  # noqa: ANN001
        if set(fields) != {"functions", "constant_names", "parameter_names"} or not all(
                isinstance(v, list) and all(isinstance(n, str) for n in v) for v in fields.values()):
            raise ValueError("complex: three lists of names expected")
        return cls(tuple(fields["functions"]), tuple(fields["constant_names"]), tuple(fields["parameter_names"]))

    # -- the user's names and values ------------------------------------------------------
    def spelled(self, name: str) -> tuple[tuple[str, Any], ...] | None:
        if name in self.functions or name in self.constant_names or name in self.parameter_names:
            re_name, im_name = part_names(name)
            return ((re_name, 1), (im_name, 1j))
        return None

    def parts(self, e, replace: dict, where: str = "an expression") -> list:  # noqa: ANN001
        """The real and imaginary parts of an expression of the user's names, with ``replace``
        made in it (just the real part when the imaginary one is zero by construction:
        ``abs(T)``, ``im(c)``)."""
        with budget("splitting an expression into real and imaginary parts"):
            if e.has(sp.Min, sp.Max):  # kept unevaluated: SymPy's own refuse complex arguments
                least, most = _inert()
                e = e.replace(sp.Min, lambda *a: _nested(least, a)).replace(sp.Max, lambda *a: _nested(most, a))
            re_part, im_part = split(e.xreplace(replace), {}, where)
        return [re_part] if im_part == 0 else [re_part, im_part]

    def inward(self, values: dict) -> dict:
        out = {}
        for name, value in values.items():
            if name in self.constant_names or name in self.parameter_names:
                z = complex(value)
                re_name, im_name = part_names(name)
                out[re_name], out[im_name] = z.real, z.imag
            else:
                out[name] = value
        return out

    def outward(self, values: dict) -> dict:
        out = dict(values)
        for name in (*self.parameter_names, *self.constant_names):
            re_name, im_name = part_names(name)
            if re_name in out and im_name in out:
                out[name] = complex(out.pop(re_name), out.pop(im_name))
        return out


def _written(name: str, k: int) -> str:
    return name + "'" * k if "(" not in name else name


# -- the split ------------------------------------------------------------------------------
_INERT: dict = {}


def _inert() -> tuple:
    """``min`` and ``max`` kept unevaluated while the split looks at their arguments (SymPy's
    own refuse complex ones); made on first use, so importing this module needs no SymPy."""
    if not _INERT:
        _INERT["min"] = type("_Least", (sp.Function,), {"nargs": 2})
        _INERT["max"] = type("_Most", (sp.Function,), {"nargs": 2})
    return _INERT["min"], _INERT["max"]


#: Functions of real arguments only (a complex argument is refused), by SymPy class name.
_REAL_ONLY = {"asin": "asin", "acos": "acos", "atan": "atan", "asinh": "asinh", "acosh": "acosh",
              "atanh": "atanh", "atan2": "atan2", "erf": "erf", "erfc": "erfc", "sign": "sign",
              "Heaviside": "a step", "_Least": "min", "_Most": "max"}


def split(e, table: dict, where: str) -> tuple:  # noqa: ANN001
    """``(re, im)`` of ``e``, whose symbols are real but those of ``table`` (symbol -> its
    ``(re, im)``): real expressions, principal branches (see the module docstring)."""
    if e.has(sp.Min, sp.Max):
        least, most = _inert()
        e = e.replace(sp.Min, lambda *a: _nested(least, a)).replace(sp.Max, lambda *a: _nested(most, a))
    memo: dict = {}
    return _Splitter(table, memo, where).pair(e)


def _nested(inert, args: tuple):  # noqa: ANN001, ANN202
    """An n-ary min or max as nested binary ones."""
    out = args[0]
    for a in args[1:]:
        out = inert(out, a)
    return out


def _real(e, table: dict, where: str):  # noqa: ANN001, ANN202
    re_part, im_part = split(e, table, where)
    if im_part != 0:
        raise ProblemError(f"{where} is complex ({sp.sstr(e)}); it must be real")
    return re_part


def _blocks(S: list, table: dict, order: list, where: dict) -> list:
    """The singular matrix ``S`` of complex states as the real matrix of their parts."""
    n = len(order)
    out = [[sp.S.Zero] * n for _ in range(n)]
    size = len(S)
    for i in range(size):
        for j in range(size):
            if S[i][j] == 0:
                continue
            a, b = split(S[i][j], table, "the singular term")
            for (pi, pj, value) in ((0, 0, a), (0, 1, -b), (1, 0, b), (1, 1, a)):
                out[where[(i, pi)]][where[(j, pj)]] = value
    return out


class _Splitter:
    def __init__(self, table: dict, memo: dict, where: str):
        self.table, self.memo, self.where = table, memo, where

    def refuse(self, what: str) -> ProblemError:
        if what in ("min", "max"):
            return ProblemError(f"{self.where}: {what} of complex values has no meaning; compare real parts or "
                                "magnitudes, e.g. re(T) or abs(T)")
        return ProblemError(f"{self.where}: {what} of a complex value is not supported; {what} takes real "
                            "arguments only (take re(...), im(...) or abs(...) of a complex one)")

    def pair(self, e) -> tuple:  # noqa: ANN001
        found = self.memo.get(e)
        if found is None:
            found = self.memo[e] = self._pair(e)
        return found

    def _pair(self, e) -> tuple:  # noqa: ANN001
        zero = sp.S.Zero
        if e in self.table:
            return self.table[e]
        if e.is_Symbol:  # a real value: its symbol with the real assumption (the form's)
            return (e if e.is_real else sp.Symbol(e.name, real=True)), zero
        if e is sp.I:
            return zero, sp.S.One
        if e.is_number and not e.has(sp.oo, -sp.oo, sp.zoo, sp.nan):
            if e.is_real:
                return e, zero
            re_part, im_part = e.as_real_imag()
            return re_part, im_part
        if e.is_Add:
            parts = [self.pair(a) for a in e.args]
            return sp.Add(*(p[0] for p in parts)), sp.Add(*(p[1] for p in parts))
        if e.is_Mul:
            return self._product(e.args)
        if e.is_Pow:
            return self._power(e.base, e.exp)
        name = type(e).__name__
        if isinstance(e, sp.exp):
            a, b = self.pair(e.args[0])
            return (sp.exp(a), zero) if b == 0 else (sp.exp(a) * sp.cos(b), sp.exp(a) * sp.sin(b))
        if isinstance(e, sp.log):
            return self._log(*self.pair(e.args[0]))
        if isinstance(e, (sp.sin, sp.cos, sp.sinh, sp.cosh, sp.tan, sp.tanh)):
            return self._analytic(e)
        if isinstance(e, sp.Abs):
            a, b = self.pair(e.args[0])
            return (sp.Abs(a), zero) if b == 0 else (sp.sqrt(a**2 + b**2), zero)
        if isinstance(e, sp.re):
            return self.pair(e.args[0])[0], zero
        if isinstance(e, sp.im):
            return self.pair(e.args[0])[1], zero
        if isinstance(e, sp.conjugate):
            a, b = self.pair(e.args[0])
            return a, -b
        if isinstance(e, sp.arg):
            a, b = self.pair(e.args[0])
            return sp.atan2(b, a), zero
        if name in _REAL_ONLY:
            parts = [self.pair(a) for a in e.args]
            if any(b != 0 for _, b in parts):
                raise self.refuse(_REAL_ONLY[name])
            args = [a for a, _ in parts]
            if name == "_Least":
                return sp.Min(*args), zero
            if name == "_Most":
                return sp.Max(*args), zero
            return e.func(*args), zero
        if not e.free_symbols and not e.has(*self.table):
            return e, zero  # a number SymPy keeps unevaluated (erf(1)): real
        raise ProblemError(f"{self.where}: {name} of a complex value cannot be split into real and imaginary parts")

    def _product(self, factors) -> tuple:  # noqa: ANN001
        real, rest = [], []
        for f in factors:
            a, b = self.pair(f)
            (real if b == 0 else rest).append((a, b))
        coefficient = sp.Mul(*(a for a, _ in real))
        if not rest:
            return coefficient, sp.S.Zero
        # multiplied in pairs, then pairs of pairs: each part of a product of n complex factors
        # holds about n**2 terms, where one factor after another would hold 2**n
        while len(rest) > 1:
            rest = [(a * c - b * d, a * d + b * c) for (a, b), (c, d) in zip(rest[::2], rest[1::2])] + (
                [rest[-1]] if len(rest) % 2 else [])
        a, b = rest[0]
        return coefficient * a, coefficient * b

    def _power(self, base, exponent) -> tuple:  # noqa: ANN001
        a, b = self.pair(base)
        c, d = self.pair(exponent)
        zero = sp.S.Zero
        if b == 0 and d == 0 and (exponent.is_integer or base.is_nonnegative):
            return sp.Pow(a, c), zero
        if d == 0 and exponent.is_Integer:
            n = int(exponent)
            re_part, im_part = self._whole_power(a, b, abs(n))
            if n > 0:
                return re_part, im_part
            size = re_part**2 + im_part**2
            return re_part / size, -im_part / size
        if d == 0:  # the principal branch: |z|**r (cos(r theta) + i sin(r theta))
            theta = sp.atan2(b, a)
            size = sp.Abs(a) ** c if b == 0 else (a**2 + b**2) ** (c / 2)
            return size * sp.cos(c * theta), size * sp.sin(c * theta)
        # z**w = exp(w log z)
        u, v = self._log(a, b)
        re_part, im_part = c * u - d * v, c * v + d * u
        return sp.exp(re_part) * sp.cos(im_part), sp.exp(re_part) * sp.sin(im_part)

    @staticmethod
    def _whole_power(a, b, n: int) -> tuple:  # noqa: ANN001
        """``(a + i b)**n`` by repeated squaring (``n >= 1``)."""
        result = None
        square = (a, b)
        while n:
            if n & 1:
                result = square if result is None else (result[0] * square[0] - result[1] * square[1],
                                                        result[0] * square[1] + result[1] * square[0])
            n >>= 1
            if n:
                square = (square[0] ** 2 - square[1] ** 2, 2 * square[0] * square[1])
        return result

    @staticmethod
    def _log(a, b) -> tuple:  # noqa: ANN001
        if b == 0:
            if a.is_positive:
                return sp.log(a), sp.S.Zero
            return sp.log(sp.Abs(a)), sp.atan2(sp.S.Zero, a)
        return sp.log(a**2 + b**2) / 2, sp.atan2(b, a)

    def _analytic(self, e) -> tuple:  # noqa: ANN001
        a, b = self.pair(e.args[0])
        if b == 0:
            return e.func(a), sp.S.Zero
        if isinstance(e, sp.sin):
            return sp.sin(a) * sp.cosh(b), sp.cos(a) * sp.sinh(b)
        if isinstance(e, sp.cos):
            return sp.cos(a) * sp.cosh(b), -sp.sin(a) * sp.sinh(b)
        if isinstance(e, sp.sinh):
            return sp.sinh(a) * sp.cos(b), sp.cosh(a) * sp.sin(b)
        if isinstance(e, sp.cosh):
            return sp.cosh(a) * sp.cos(b), sp.sinh(a) * sp.sin(b)
        if isinstance(e, sp.tan):  # tan(a + ib) = (sin 2a + i sinh 2b) / (cos 2a + cosh 2b)
            below = sp.cos(2 * a) + sp.cosh(2 * b)
            return sp.sin(2 * a) / below, sp.sinh(2 * b) / below
        below = sp.cosh(2 * a) + sp.cos(2 * b)  # tanh(a + ib) = (sinh 2a + i sin 2b) / (cosh 2a + cos 2b)
        return sp.sinh(2 * a) / below, sp.sin(2 * b) / below
