"""The expression language: text as written on paper -> SymPy, without ``eval``.

Grammar (``=`` only in equations)::

    equation   := expression ['=' expression]
    expression := term (('+' | '-') term)*
    term       := unary (('*' | '/') unary)*
    unary      := ('+' | '-') unary | power
    power      := postfix ['**' unary]            # right-associative; -x**2 == -(x**2)
    postfix    := NAME PRIMES? ['(' arguments ')'] | NUMBER | '(' expression ')' PRIMES?

Meaning of names:

* a whitelisted function called with arguments (``exp(x)``, ``atan2(y, x)``);
* ``pi``, ``e``, ``inf`` (also ``oo``);
* ``f'''`` -- a derivative of the unknown function ``f`` with respect to the independent
  variable: ``Derivative(f(x), (x, 3))``;
* ``f(0)``, ``f'(inf)``, ``f(L)`` -- a point evaluation: ``f(0)``, ``Subs(Derivative(f(x), x), x, oo)``;
* ``f(L-)``, ``f'(L+)`` -- a one-sided value at an interface (from the left, from the right):
  :class:`SideValue`;
* ``(expression)'`` -- the derivative of a bracket (``((1 + b*T)*T')'``), kept as an
  unevaluated ``Derivative`` until the names in it are known;
* any other bare name -- a ``Symbol`` (the independent variable, a constant, a parameter, or
  an unknown function at the running point; :mod:`bvpkit.language.problem` decides which).

Everything else (attribute access, subscripts, strings, keywords, lambdas, ``^``, ``!``)
is refused with the column of the offending text, and so are inputs that would exhaust
time or memory (see the ``MAX_*`` limits below), before SymPy ever sees them.
"""

from __future__ import annotations

import keyword
import math
import re
from dataclasses import dataclass

import sympy as sp

from ..errors import ExpressionError, closest
from .limits import LARGEST, SMALLEST, in_range, integer_in_range

# Limits that keep hostile or mistaken input cheap to refuse. A real ODE is a few hundred
# characters and a handful of levels deep; these are two orders of magnitude above that.
MAX_LENGTH = 10_000  # characters in one expression
MAX_DEPTH = 60  # nesting of parentheses / unary operators (Python's recursion limit is 1000)
MAX_EXPONENT = 1_000  # |n| in a numeric exponent: beyond it, no float result is meaningful
MAX_DERIVATIVE = 12  # primes on one name
MAX_DECIMAL_EXPONENT = 300  # numbers beyond 1e300 are refused (bvpkit.language.limits says why)

#: Whitelisted functions: name -> (SymPy callable, number of arguments).
FUNCTIONS: dict[str, tuple[object, int]] = {
    "exp": (sp.exp, 1),
    "log": (sp.log, 1),
    "ln": (sp.log, 1),
    "sqrt": (sp.sqrt, 1),
    "sin": (sp.sin, 1),
    "cos": (sp.cos, 1),
    "tan": (sp.tan, 1),
    "sinh": (sp.sinh, 1),
    "cosh": (sp.cosh, 1),
    "tanh": (sp.tanh, 1),
    "asin": (sp.asin, 1),
    "acos": (sp.acos, 1),
    "atan": (sp.atan, 1),
    "asinh": (sp.asinh, 1),
    "acosh": (sp.acosh, 1),
    "atanh": (sp.atanh, 1),
    "atan2": (sp.atan2, 2),
    "abs": (sp.Abs, 1),
    "erf": (sp.erf, 1),
    "erfc": (sp.erfc, 1),
    "min": (sp.Min, 2),
    "max": (sp.Max, 2),
}

#: Names with a fixed meaning; they cannot name a constant, parameter or function.
RESERVED: dict[str, sp.Expr] = {"pi": sp.pi, "e": sp.E, "inf": sp.oo, "oo": sp.oo}


class DomainIntegral(sp.Function):
    """``integral(expr)``: the integral of ``expr`` over the whole domain (conditions only).

    Kept unevaluated; :mod:`bvpkit.reduce.form` turns each one into an added state ``z`` with
    ``z' = expr``, ``z(a) = 0``, and reads the integral as ``z(b)``.
    """

    nargs = 1

    def _sympystr(self, printer):  # noqa: ANN001, ANN202
        return f"integral({printer.doprint(self.args[0])})"


INTEGRAL = "integral"


class SideValue(sp.Function):
    """``f(X-)``, ``f'(X+)``: the value of ``f`` (or a derivative) at ``X`` from the left
    (``side = -1``) or from the right (``side = +1``), for a state that may jump at an
    interface. ``args = (point value, side)``; :mod:`bvpkit.language.problem` reads them."""

    nargs = 2

    def _sympystr(self, printer):  # noqa: ANN001, ANN202
        value, side = self.args
        text = printer.doprint(value)
        return f"{text[:-1]}{'-' if side < 0 else '+'})" if text.endswith(")") else f"{text}{'-' if side < 0 else '+'}"

_TOKEN = re.compile(
    r"""
    (?P<space>\s+)
  | (?P<number>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)
  | (?P<name>[A-Za-z_][A-Za-z_0-9]*)
  | (?P<primes>'+)
  | (?P<op>\*\*|[-+*/(),=])
    """,
    re.VERBOSE,
)

_REFUSED_CHARS = {
    "^": "'^' is not a power operator here; write '**' (x**2)",
    ".": "attribute access is not allowed",
    "[": "subscripts are not allowed",
    "]": "subscripts are not allowed",
    "{": "braces are not allowed",
    "}": "braces are not allowed",
    '"': "strings are not allowed",
    "!": "factorials and '!' are not allowed",
    ":": "':' is not allowed (no lambdas, slices or annotations)",
    ";": "only one expression is allowed",
    "@": "'@' is not allowed",
    "<": "comparisons are not allowed; write an equation with '='",
    ">": "comparisons are not allowed; write an equation with '='",
}


@dataclass(frozen=True)
class _Token:
    kind: str  # number, name, primes, op, end
    text: str
    column: int


def _tokenize(text: str) -> list[_Token]:
    if not isinstance(text, str):
        raise ExpressionError(f"expected an expression as text, got {type(text).__name__}")
    if len(text) > MAX_LENGTH:
        raise ExpressionError(
            f"expression is {len(text)} characters long; the limit is {MAX_LENGTH}"
        )
    tokens: list[_Token] = []
    pos = 0
    while pos < len(text):
        match = _TOKEN.match(text, pos)
        if match is None:
            char = text[pos]
            if char == "'":  # unreachable: primes always match
                raise ExpressionError("unexpected quote", text, pos)
            if char == "=" and text.startswith("==", pos):
                raise ExpressionError("write equations with a single '='", text, pos)
            reason = _REFUSED_CHARS.get(char, f"unexpected character {char!r}")
            raise ExpressionError(reason, text, pos)
        kind = match.lastgroup
        if kind == "op" and match.group() == "=" and text.startswith("==", pos):
            raise ExpressionError("write equations with a single '='", text, pos)
        if kind != "space":
            tokens.append(_Token(kind, match.group(), pos))
        pos = match.end()
        if kind == "number" and pos < len(text) and (text[pos].isalpha() or text[pos] == "_"):
            raise ExpressionError(
                "a number runs into a name; write '*' for a product (2*x)", text, pos
            )
    tokens.append(_Token("end", "", len(text)))
    return tokens


def _number(token: _Token, text: str) -> sp.Expr:
    literal = token.text
    try:
        value = float(literal)
    except (ValueError, OverflowError):  # pragma: no cover - the regex only admits numbers
        raise ExpressionError("unreadable number", text, token.column) from None
    if not math.isfinite(value) or not in_range(value):
        size = "large" if not math.isfinite(value) or abs(value) > LARGEST else "small"
        raise ExpressionError(
            f"number {literal} is too {size} for floating point (the accepted range is zero, or "
            f"magnitudes from {SMALLEST:g} to {LARGEST:g})", text, token.column
        )
    if re.fullmatch(r"\d+", literal):
        if len(literal) > 18:
            raise ExpressionError(
                "integer literal has more than 18 digits; write it as a decimal (1.5e30)",
                text,
                token.column,
            )
        return sp.Integer(int(literal))
    return sp.Float(value)


class _Parser:
    def __init__(self, text: str, independent: sp.Symbol):
        self.text = text
        self.x = independent
        self.tokens = _tokenize(text)
        self.pos = 0
        self.depth = 0
        self.values: dict[sp.Basic, complex] = {}  # numeric subexpression -> its value (see _checked)

    # -- token helpers ------------------------------------------------------------------
    @property
    def tok(self) -> _Token:
        return self.tokens[self.pos]

    def _advance(self) -> _Token:
        token = self.tokens[self.pos]
        self.pos += 1
        return token

    def _is(self, text: str) -> bool:
        return self.tok.kind == "op" and self.tok.text == text

    def _expect(self, text: str, what: str) -> _Token:
        if not self._is(text):
            found = repr(self.tok.text) if self.tok.kind != "end" else "the end"
            raise ExpressionError(f"expected {what}, found {found}", self.text, self.tok.column)
        return self._advance()

    def _side_marker(self) -> bool:
        """A '+' or '-' right before ')': the side of a one-sided point value, f(L-)."""
        following = self.tokens[self.pos + 1] if self.pos + 1 < len(self.tokens) else None
        return following is not None and following.kind == "op" and following.text == ")"

    def _error(self, reason: str, token: _Token | None = None) -> ExpressionError:
        token = token or self.tok
        return ExpressionError(reason, self.text, token.column)

    def _enter(self) -> None:
        self.depth += 1
        if self.depth > MAX_DEPTH:
            raise self._error(f"expression is nested more than {MAX_DEPTH} levels deep")

    # -- grammar ------------------------------------------------------------------------
    def equation(self) -> tuple[sp.Expr, sp.Expr | None]:
        lhs = self.expression()
        rhs = None
        if self._is("="):
            self._advance()
            rhs = self.expression()
            if self._is("="):
                raise self._error("only one '=' is allowed in an equation")
        self._finish()
        return lhs, rhs

    def _finish(self) -> None:
        if self.tok.kind != "end":
            if self.tok.kind in ("name", "number", "primes") or self._is("("):
                raise self._error(
                    f"unexpected {self.tok.text!r}; a missing operator such as '*'?"
                )
            raise self._error(f"unexpected {self.tok.text!r}")

    def expression(self) -> sp.Expr:
        self._enter()
        value = self.term()
        while (self._is("+") or self._is("-")) and not self._side_marker():
            op_token = self._advance()
            right = self.term()
            if op_token.text == "+":
                value = self._checked(value + right, op_token, (value, right), "+")
            else:
                value = self._checked(value - right, op_token, (value, right), "-")
        self.depth -= 1
        return value

    def term(self) -> sp.Expr:
        value = self.unary()
        while self._is("*") or self._is("/"):
            op_token = self._advance()
            right = self.unary()
            if op_token.text == "*":
                value = self._checked(value * right, op_token, (value, right), "*")
            else:
                if right == 0:
                    raise self._error("division by zero", op_token)
                value = self._checked(value / right, op_token, (value, right), "/")
        return value

    def unary(self) -> sp.Expr:
        if self._is("-") or self._is("+"):
            self._enter()
            op = self._advance().text
            operand = self.unary()
            self.depth -= 1
            return -operand if op == "-" else operand
        return self.power()

    def power(self) -> sp.Expr:
        base = self.postfix()
        if self._is("**"):
            op_token = self._advance()
            self._enter()
            exponent = self.unary()
            self.depth -= 1
            return self._pow(base, exponent, op_token)
        return base

    def _pow(self, base: sp.Expr, exponent: sp.Expr, token: _Token) -> sp.Expr:
        if exponent.is_number:
            value = complex(exponent.evalf(20))
            if abs(value) > MAX_EXPONENT:
                raise self._error(
                    f"exponent {exponent} is too large (the limit is {MAX_EXPONENT})", token
                )
            if base.is_number:
                magnitude = abs(complex(base.evalf(20)))
                if magnitude == 0 and value.real < 0:
                    raise self._error("zero raised to a negative power", token)
                if magnitude > 0 and abs(value.real * math.log10(magnitude)) > MAX_DECIMAL_EXPONENT:
                    size = "large" if value.real * math.log10(magnitude) > 0 else "small"
                    raise self._error(f"power is too {size} for floating point (the accepted range is zero, "
                                      f"or magnitudes from {SMALLEST:g} to {LARGEST:g})", token)
        return self._checked(sp.Pow(base, exponent), token)

    # -- numbers stay inside the float range as they are built ----------------------------
    def _checked(self, value: sp.Expr, token: _Token, operands: tuple[sp.Expr, sp.Expr] | None = None,
                 operation: str = "") -> sp.Expr:
        """``value``, unless a number in it has left the accepted range.

        SymPy folds numbers as an expression is built: ``2**900*x*2**900`` holds the
        coefficient ``2**1800``, and a number times a sum is distributed over the sum. So
        after each operation the numbers at the top of the result are checked (the
        coefficient of each term), and a wholly numeric result (``exp(exp(10))``) is valued
        from the values of its ``operands`` (kept in ``self.values``), so no number is
        evaluated twice and SymPy never builds a 4300-digit integer out of small ones.
        """
        if value in (sp.oo, -sp.oo):
            return value
        if value is sp.nan or value is sp.zoo:
            raise self._error("this gives an infinite or undefined value (such as log(0), inf - inf)", token)
        if value.is_Number:
            self._check_number(value, token)
            return value
        if value.is_Add or value.is_Mul:
            # Long sums are only ever added to: their new coefficients come from the right
            # operand (merged like terms at most add two in-range numbers).
            terms = value.args if len(value.args) <= _FULL_CHECK or operands is None else (
                value.args[0], *sp.Add.make_args(operands[1]))
            for arg in terms:
                coefficient = arg.args[0] if arg.is_Mul else arg
                if coefficient.is_Number:
                    self._check_number(coefficient, token)
        if value.is_number and not value.has(DomainIntegral, sp.oo, -sp.oo):
            approximate = None
            if operands is not None and all(o.is_number for o in operands):
                a, b = (self._value(o) for o in operands)
                if a is not None and b is not None:
                    approximate = _combine(operation, a, b)
                    self.values[value] = approximate
            if approximate is None:
                approximate = self._value(value)
            if approximate is not None and not (math.isfinite(abs(approximate)) and in_range(abs(approximate))):
                raise self._error(self._outside(value), token)
        return value

    def _check_number(self, number: sp.Expr, token: _Token) -> None:
        if number in (sp.oo, -sp.oo):
            return
        if number is sp.nan or number is sp.zoo:
            raise self._error("this gives an infinite or undefined value (such as log(0), inf - inf)", token)
        if number.is_Rational:
            ok = integer_in_range(number.p, number.q)
        else:  # a Float: SymPy's own exponent never overflows, so 1e-200*1e-200 is 1e-400, not 0
            value = float(number)
            ok = math.isfinite(value) and in_range(value) and (value != 0 or number == 0)
        if not ok:
            raise self._error(self._outside(number), token)

    @staticmethod
    def _outside(number: sp.Expr) -> str:
        if number.is_Rational and max(abs(number.p).bit_length(), number.q.bit_length()) > 64:
            shown = f"a number near 10**{round((abs(number.p).bit_length() - number.q.bit_length()) * math.log10(2))}"
        else:
            shown = _short(number)
        return (f"{shown} is outside the accepted range of numbers (zero, or magnitudes from "
                f"{SMALLEST:g} to {LARGEST:g})")

    def _value(self, e: sp.Expr) -> complex | None:
        """The value of a numeric expression from the values of its parts (memoised)."""
        known = self.values.get(e)
        if known is not None:
            return known
        try:
            if e.is_Number or e in (sp.pi, sp.E):
                if e.is_Rational and not integer_in_range(e.p, e.q):
                    return complex(math.inf)
                value = complex(float(e))
            elif e.is_Add or e.is_Mul:
                parts = [self._value(a) for a in e.args]
                if any(v is None for v in parts):
                    return None
                value = parts[0]  # type: ignore[assignment]
                for part in parts[1:]:
                    value = _combine("+" if e.is_Add else "*", value, part)  # type: ignore[arg-type]
            elif e.is_Pow:
                base, exponent = self._value(e.base), self._value(e.exp)
                if base is None or exponent is None:
                    return None
                value = _combine("**", base, exponent)
            else:  # a function of numbers: SymPy evaluates it once, on the values of its arguments
                parts = [self._value(a) for a in e.args]
                if any(v is None for v in parts):
                    return None
                args = [sp.Float(v.real) + sp.I * sp.Float(v.imag) if v.imag else sp.Float(v.real) for v in parts]
                exact = e.func(*args).evalf(17)
                value = complex(exact)
                if value == 0 and exact != 0:  # underflow: exp(-1000) is 5e-435, not zero
                    value = complex(math.inf)
        except (OverflowError, ZeroDivisionError):
            value = complex(math.inf)
        except (TypeError, ValueError):
            return None  # not a plain number (a symbol inside, an unevaluated function)
        if value != value:  # NaN: an undefined value, e.g. inf - inf
            value = complex(math.inf)
        self.values[e] = value
        return value

    def postfix(self) -> sp.Expr:
        token = self.tok
        if token.kind == "number":
            self._advance()
            return _number(token, self.text)
        if self._is("("):
            self._advance()
            value = self.expression()
            self._expect(")", "')'")
            if self.tok.kind == "primes":
                # ((1 + b*T)*T')': the derivative of the bracket, taken once the names are
                # known (problem.py evaluates it after reading T as a function of x)
                primes = len(self._advance().text)
                if primes > MAX_DERIVATIVE:
                    raise self._error(f"more than {MAX_DERIVATIVE} primes on a bracket", token)
                return sp.Derivative(value, (self.x, primes), evaluate=False)
            return value
        if token.kind == "name":
            return self._name()
        if token.kind == "primes":
            raise self._error("primes must follow the name of a function (f')")
        if token.kind == "end":
            raise self._error("expression ends too early")
        raise self._error(f"unexpected {token.text!r}")

    def _name(self) -> sp.Expr:
        token = self._advance()
        name = token.text
        if keyword.iskeyword(name) or keyword.issoftkeyword(name):
            raise self._error(f"'{name}' is a Python keyword and not allowed here", token)
        if name.startswith("_"):
            raise self._error("names may not start with '_'", token)
        primes = 0
        if self.tok.kind == "primes":
            primes = len(self._advance().text)
            if primes > MAX_DERIVATIVE:
                raise self._error(f"more than {MAX_DERIVATIVE} primes on '{name}'", token)
        called = self._is("(")
        if name in FUNCTIONS:
            if primes:
                raise self._error(f"'{name}' is a built-in function; it cannot take primes", token)
            if not called:
                raise self._error(f"'{name}' is a function; call it as {name}(...)", token)
            func, nargs = FUNCTIONS[name]
            args = self._arguments()
            if len(args) != nargs:
                raise self._error(
                    f"'{name}' takes {nargs} argument{'s' if nargs > 1 else ''}, got {len(args)}",
                    token,
                )
            try:
                value = func(*args)
            except ExpressionError:
                raise
            except (ArithmeticError, ValueError, TypeError, RecursionError) as err:
                # SymPy evaluates a function of constants as it builds it: erfc(1e300) overflows
                # inside mpmath, min(y, acos(2)) cannot order a complex constant
                shown = ", ".join(_short(a) for a in args)
                raise self._error(f"{name}({shown}) cannot be evaluated ({_reason(err)}); check its "
                                  "arguments' range", token) from None
            return self._checked(value, token)
        if name == INTEGRAL:
            if primes or not called:
                raise self._error("write integral(expression) for an integral over the domain", token)
            args = self._arguments()
            if len(args) != 1:
                raise self._error("integral takes one argument: the integrand", token)
            if args[0].has(DomainIntegral):
                raise self._error("integrals cannot be nested", token)
            return DomainIntegral(args[0])
        if name in RESERVED:
            if primes or called:
                raise self._error(f"'{name}' is a reserved constant, not a function", token)
            return RESERVED[name]
        if name == self.x.name:
            if primes or called:
                raise self._error(
                    f"'{name}' is the independent variable, not a function", token
                )
            return self.x
        if not primes and not called:
            return sp.Symbol(name)
        function = sp.Function(name)(self.x)
        value = sp.Derivative(function, (self.x, primes)) if primes else function
        if not called:
            return value
        self._expect("(", "'('")
        point = self.expression()
        side = 0
        if (self._is("-") or self._is("+")) and self._side_marker():
            side = -1 if self._advance().text == "-" else 1
        if self._is(","):
            raise self._error(f"a point value of '{name}' takes one argument", token)
        self._expect(")", "')'")
        if point == self.x:
            if side:
                raise self._error(f"a one-sided value needs a point, e.g. {name}(1-)", token)
            return value
        # a name applied to an expression is most often a mistyped function (exq(y)): say so first
        mistyped = "" if primes else closest(name, FUNCTIONS)
        prefix = f"'{name}' is not a known function{mistyped}; as an unknown function, " if mistyped else ""
        if self.x in point.free_symbols:
            raise self._error(
                f"{prefix}'{name}' may be evaluated at a fixed point only, not at an expression of "
                f"'{self.x.name}'",
                token,
            )
        if point.has(sp.Function) or point.has(sp.Derivative) or point.has(sp.Subs):
            raise self._error(f"{prefix}the point of an evaluation must be a number or constant", token)
        at = sp.Subs(value, self.x, point) if primes else sp.Function(name)(point)
        return SideValue(at, side) if side else at

    def _arguments(self) -> list[sp.Expr]:
        self._expect("(", "'('")
        args = [self.expression()]
        while self._is(","):
            self._advance()
            args.append(self.expression())
        self._expect(")", "')' or ','")
        return args


#: Sums longer than this have only their new terms checked (see _Parser._checked): checking
#: every term of every partial sum would make reading a long sum quadratic in its length.
_FULL_CHECK = 100


def _combine(operation: str, a: complex, b: complex) -> complex:
    """``a operation b`` in complex floats; an underflow (a product, quotient or power of
    non-zero numbers that came out as zero) counts as out of range, as an overflow does."""
    if operation in "+-":
        return a + b if operation == "+" else a - b
    result = a * b if operation == "*" else a / b if operation == "/" else a**b
    if result == 0 and a != 0 and b != 0:
        return complex(math.inf)
    return result


def _reason(err: Exception) -> str:
    """SymPy's or mpmath's complaint in a few words of ours."""
    if isinstance(err, OverflowError):
        return "a number in it is too large for floating point"
    if isinstance(err, ZeroDivisionError):
        return "a division by zero"
    if "comparable" in str(err):
        return "an argument is not a real number"
    return "it has no real value"


def _short(e: sp.Expr) -> str:
    try:
        text = sp.sstr(e)
    except ValueError:  # an integer beyond Python's limit on digits converted to text
        return "a number with too many digits"
    return text if len(text) <= 60 else text[:57] + "..."


def parse(text: str, independent: str | sp.Symbol = "x") -> sp.Expr:
    """Parse an expression (no ``=``) into SymPy.

    Parameters
    ----------
    text : str
        The expression, e.g. ``"f''(0)"`` or ``"1 - f'"``.
    independent : str or sympy.Symbol
        Name of the independent variable (``"x"`` by default).

    Raises
    ------
    ExpressionError
        Anything outside the language, with the column of the offending text.
    """
    x = _as_symbol(independent)
    lhs, rhs = _Parser(text, x).equation()
    if rhs is not None:
        raise ExpressionError("an expression cannot contain '='", text, text.index("="))
    return lhs


def parse_equation(text: str, independent: str | sp.Symbol = "x") -> sp.Expr:
    """Parse ``lhs = rhs`` (or a bare ``expr`` meaning ``expr = 0``) into ``lhs - rhs``."""
    x = _as_symbol(independent)
    lhs, rhs = _Parser(text, x).equation()
    return lhs if rhs is None else lhs - rhs


def _as_symbol(independent: str | sp.Symbol) -> sp.Symbol:
    if isinstance(independent, sp.Symbol):
        return independent
    check_name(independent, "independent variable")
    return sp.Symbol(independent)


def check_name(name: object, role: str) -> str:
    """Check that ``name`` can name a variable, constant or function; return it."""
    if not isinstance(name, str) or not re.fullmatch(r"[A-Za-z][A-Za-z_0-9]*", name):
        raise ExpressionError(
            f"{role} name {name!r} must start with a letter and hold letters, digits and '_'"
        )
    if keyword.iskeyword(name) or keyword.issoftkeyword(name):
        raise ExpressionError(f"{role} name '{name}' is a Python keyword")
    if name in RESERVED or name in FUNCTIONS or name == INTEGRAL:
        raise ExpressionError(f"{role} name '{name}' is reserved (a built-in constant or function)")
    if len(name) > 64:
        raise ExpressionError(f"{role} name '{name[:20]}...' is longer than 64 characters")
    return name


def unknown_name_error(name: str, known: list[str], where: str) -> ExpressionError:
    """An error for an undeclared name, with the closest known name suggested."""
    return ExpressionError(f"unknown name '{name}' in {where}{closest(name, known)}")
