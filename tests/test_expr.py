"""The expression language: meaning of what is accepted, and refusal of everything else."""

import time

import pytest
import sympy as sp
from hypothesis import given
from hypothesis import strategies as st

from bvpkit.errors import ExpressionError
from bvpkit.language.expr import parse, parse_equation

x = sp.Symbol("x")
f = sp.Function("f")


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("1 + 2*3", sp.Integer(7)),
        ("-x**2", -(x**2)),  # unary minus binds looser than ** (common practice, no source)
        ("2**3**2", sp.Integer(512)),  # ** is right-associative
        ("1/2", sp.Rational(1, 2)),
        ("f'''", sp.Derivative(f(x), (x, 3))),
        ("f(0)", f(0)),
        ("f'(inf)", sp.Subs(sp.Derivative(f(x), x), x, sp.oo)),
        ("f'(x)", sp.Derivative(f(x), x)),
        ("exp(x) + log(2) + atan2(1, x)", sp.exp(x) + sp.log(2) + sp.atan2(1, x)),
        ("pi + e", sp.pi + sp.E),
        ("2.5e-3*x", sp.Float(2.5e-3) * x),
        (".5", sp.Float(0.5)),
        ("abs(-x)", sp.Abs(x)),
    ],
)
def test_accepted_expressions_mean_what_they_say(text, expected):
    assert sp.simplify(parse(text) - expected) == 0


def test_equation_is_lhs_minus_rhs():
    # a bare name stays a Symbol here; the Problem decides it is the unknown function f(x)
    assert parse_equation("f'' = -f") == sp.Derivative(f(x), (x, 2)) + sp.Symbol("f")


def test_independent_variable_name_is_respected():
    eta = sp.Symbol("eta")
    assert parse("f'", "eta") == sp.Derivative(sp.Function("f")(eta), eta)
    with pytest.raises(ExpressionError, match="independent variable, not a function"):
        parse("eta(1)", "eta")


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("x.__class__", "attribute access"),
        ("().__class__.__bases__[0]", "attribute access"),
        ("f[0]", "subscripts"),
        ("'abc'", "primes must follow"),
        ('"abc"', "strings"),
        ("lambda: 1", "':' is not allowed"),
        ("lambda y", "keyword"),
        ("[i for i in x]", "subscripts"),
        ("__import__('os')", "start with '_'"),
        ("open(1)", None),  # not a whitelisted function: parsed as a point value, refused by Problem
        ("x^2", r"write '\*\*'"),
        ("3!", "factorials"),
        ("10**10**10", "exponent .* too large"),
        ("9**999", "too large for floating point"),
        ("1e999", "too large"),
        ("123456789012345678901234567890", "more than 18 digits"),
        ("(" * 200 + "x" + ")" * 200, "nested more than"),
        ("x" + "+x" * 6000, "characters long"),
        ("2x", "write '\\*' for a product"),
        ("exp(1, 2)", "takes 1 argument"),
        ("exp", "call it as exp"),
        ("f(2*x)", "fixed point"),
        ("x == 1", "single '='"),
        ("x = 1", "cannot contain '='"),
        ("x +", "ends too early"),
        ("f''''''''''''''''''''", "primes"),
        ("1/0", "division by zero"),
        ("a; b", "only one expression"),
    ],
)
def test_refusals_name_the_problem_and_the_column(text, message):
    if message is None:
        parse(text)  # a point value of an unknown 'open'; the Problem checks names
        return
    with pytest.raises(ExpressionError, match=message) as info:
        parse(text)
    assert "column" in str(info.value) or "characters long" in str(info.value)


def test_refusal_shows_a_caret_under_the_offending_column():
    with pytest.raises(ExpressionError) as info:
        parse("1 + x.y")
    lines = str(info.value).splitlines()
    assert lines[-1].index("^") == 4 + lines[-2].strip().index(".")


def test_hostile_input_is_refused_quickly():
    hostile = ["9**9**9**9", "(" * 5000, "-" * 100_000 + "x", "x" * 10**6]
    start = time.perf_counter()
    for text in hostile:
        with pytest.raises(ExpressionError):
            parse(text)
    assert time.perf_counter() - start < 2.0  # generous bound; each refusal is a scan of the text


_names = st.sampled_from(["a", "b", "x", "k1"])
_numbers = st.integers(0, 50).map(str)


def _expressions():
    leaf = st.one_of(_names, _numbers)
    return st.recursive(
        leaf,
        lambda inner: st.one_of(
            st.tuples(inner, st.sampled_from(["+", "-", "*"]), inner).map(lambda t: f"({t[0]} {t[1]} {t[2]})"),
            leaf.map(lambda s: f"exp({s})"),  # exp of exp of a number would exceed the exponent limit
            inner.map(lambda s: f"-{s}"),
        ),
        max_leaves=12,
    )


@given(_expressions())
def test_printed_sympy_parses_back_to_the_same_expression(text):
    # round trip: text -> sympy -> str -> sympy (sympy's printer uses ** and our function names)
    e = parse(text)
    printed = sp.sstr(e.subs(sp.E, sp.Symbol("e")))  # SymPy prints Euler's number as E; we spell it e
    assert sp.simplify(parse(printed) - e) == 0


@given(st.text(max_size=60))
def test_any_text_parses_or_raises_an_expression_error(text):
    try:
        parse(text)
    except ExpressionError:
        pass
