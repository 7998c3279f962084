"""Programs (generated functions as plain data): the printer, the build, and every function of
the expression language taken through parse, reduction, code generation and a solve."""

import math

import numpy as np
import pytest
import scipy.special
from hypothesis import given, settings
from hypothesis import strategies as st

import bvpkit
from bvpkit.errors import ProgramError
from bvpkit.language.expr import FUNCTIONS as LANGUAGE
from bvpkit.programs import program


def _quantity(entries, temps=(), args=(("x", ["_x"]), ("y", ["_y0", "_y1"]))):
    return {"name": "quantity", "args": [[a, list(s)] for a, s in args], "shape": [len(entries)], "mesh": "y",
            "temps": [list(t) for t in temps], "entries": [[[i], tree] for i, tree in enumerate(entries)]}


# -- every function of the expression language, end to end ------------------------------------
#
# Manufactured problems (analytic): u(x) = c + x**2/4 solves
#     y'' = F(y) - F(u(x)) + 1/2,   G(y(0)) = G(c),   y(1) = c + 1/4,
# where G is F without its dependence on x. The Jacobian needs F' (and the condition G');
# the guess carries F too, so its derivative is generated; the output G(y(1/2)) is checked
# against Python's math module / scipy.special at u(1/2). F'(u) > -pi**2 on the range, so
# the linearised problem v'' = F'(u) v has only the zero solution: the answer is unique.

# name -> (F as text with {} for its argument, G as text, reference G(u), c)
CASES = {
    "exp": ("exp({})", "exp({})", math.exp, 0.5),
    "log": ("log({})", "log({})", math.log, 0.5),
    "ln": ("ln({})", "ln({})", math.log, 0.5),
    "sqrt": ("sqrt({})", "sqrt({})", math.sqrt, 0.5),
    "sin": ("sin({})", "sin({})", math.sin, 0.5),
    "cos": ("cos({})", "cos({})", math.cos, 0.5),
    "tan": ("tan({})", "tan({})", math.tan, 0.5),
    "sinh": ("sinh({})", "sinh({})", math.sinh, 0.5),
    "cosh": ("cosh({})", "cosh({})", math.cosh, 0.5),
    "tanh": ("tanh({})", "tanh({})", math.tanh, 0.5),
    "asin": ("asin({})", "asin({})", math.asin, 0.5),
    "acos": ("acos({})", "acos({})", math.acos, 0.5),
    "atan": ("atan({})", "atan({})", math.atan, 0.5),
    "asinh": ("asinh({})", "asinh({})", math.asinh, 0.5),
    "acosh": ("acosh({})", "acosh({})", math.acosh, 1.5),  # acosh needs arguments >= 1
    "atanh": ("atanh({})", "atanh({})", math.atanh, 0.5),
    "atan2": ("atan2({}, 1 + x)", "atan2({}, 2)", lambda u: math.atan2(u, 2), 0.5),
    # the kink at 0.6 lies inside the domain (u = 0.6 at x = 0.63): the Jacobian steps there
    "abs": ("abs({} - 0.6)", "abs({})", abs, 0.5),
    "erf": ("erf({})", "erf({})", scipy.special.erf, 0.5),
    "erfc": ("erfc({})", "erfc({})", scipy.special.erfc, 0.5),
    "min": ("min({}, 0.6)", "min({}, 1)", lambda u: min(u, 1.0), 0.5),
    "max": ("max({}, 0.6)", "max({}, 0)", lambda u: max(u, 0.0), 0.5),
}


def test_the_cases_cover_every_function_of_the_language():
    assert set(CASES) == set(LANGUAGE)


def _manufactured(name):
    f, g, reference, c = CASES[name]
    u = f"({c} + x**2/4)"
    return bvpkit.Problem(
        [f"y'' = {f.format('y')} - {f.format(u)} + 0.5"],
        [f"{g.format('y(0)')} = {float(reference(c))!r}", f"y(1) = {c + 0.25!r}"],
        (0, 1),
        guess={"y": f"{c} + 0.25*x + 0.05*x*(1 - x)*{f.format(f'({c} + 0.1*x)')}"},
        outputs={"value": g.format("y(0.5)")},
    )


@pytest.mark.parametrize("name", sorted(CASES))
def test_every_function_solves_its_manufactured_problem(name):
    _, _, reference, c = CASES[name]
    solution = bvpkit.solve(_manufactured(name), tol=1e-8)
    assert solution.success, solution.message
    for x in (0.0, 0.25, 0.5, 0.75, 1.0):
        # analytic: u(x)
        assert solution.evaluate(f"y({x})") == pytest.approx(c + x**2 / 4, rel=1e-7, abs=1e-8)
    # the output through the reference library at the analytic solution
    assert solution.outputs["value"] == pytest.approx(reference(c + 0.0625), rel=1e-7, abs=1e-8)


@pytest.mark.parametrize("name", sorted(CASES))
def test_every_function_has_the_exact_jacobian(name):
    compiled = bvpkit.prepare(_manufactured(name)).compiled  # domain (0, 1): t = x
    c = CASES[name][3]
    x = np.linspace(0.05, 0.95, 7)
    y = np.vstack([c + x**2 / 4 + 0.01 * np.sin(7 * x), np.cos(x)])
    p, k, h = np.zeros(0), np.zeros(0), 1e-6
    jac = compiled.jac(x, y, p, k)
    for j in range(2):
        step = np.zeros_like(y)
        step[j] = h
        central = (compiled.rhs(x, y + step, p, k) - compiled.rhs(x, y - step, p, k)) / (2 * h)
        np.testing.assert_allclose(jac[:, j], central, rtol=1e-6, atol=1e-8)  # common practice, no source
    ya, yb = y[:, 0], y[:, -1]
    dya, dyb, _ = compiled.bc_jac(ya, yb, p, k)
    for j in range(2):
        e = np.zeros(2)
        e[j] = h
        left = (compiled.bc(ya + e, yb, p, k) - compiled.bc(ya - e, yb, p, k)) / (2 * h)
        right = (compiled.bc(ya, yb + e, p, k) - compiled.bc(ya, yb - e, p, k)) / (2 * h)
        np.testing.assert_allclose(dya[:, j], left, rtol=1e-6, atol=1e-8)
        np.testing.assert_allclose(dyb[:, j], right, rtol=1e-6, atol=1e-8)


def test_abs_of_an_argument_sympy_cannot_prove_real_differentiates_to_sign():
    # d|log y|/dy = sign(log y)/y (analytic); SymPy's own Abs gives re/im terms here
    problem = bvpkit.Problem(["y'' = abs(log(y)) - abs(log(1 + x))"], ["y(0) = 1", "y(1) = 2"], (0, 1),
                             guess={"y": "1 + x"})
    compiled = bvpkit.prepare(problem).compiled  # domain (0, 1): t = x
    y = np.array([[0.5, 2.0], [0.0, 0.0]])
    assert compiled.jac(np.array([0.1, 0.2]), y, np.zeros(0), np.zeros(0))[1, 0] == pytest.approx([-2.0, 0.5])
    solution = bvpkit.solve(problem, tol=1e-8)
    assert solution.success
    assert solution.evaluate("y(0.5)") == pytest.approx(1.5, rel=1e-7)  # analytic: y = 1 + x


def test_a_third_order_guess_through_a_kink_has_its_piecewise_derivatives():
    # the guess abs(x - 1/2) needs two derivatives: sign, then the step's derivative (0 off the kink)
    problem = bvpkit.Problem(["y''' = 0"], ["y(0) = 0.5", "y'(0) = -1", "y(1) = 0.5"], (0, 1),
                             guess={"y": "abs(x - 0.5)"})
    solution = bvpkit.solve(problem)
    assert solution.success
    x = np.linspace(0, 1, 11)
    # analytic: y = 1/2 - x + x**2 meets y(0) = 1/2, y'(0) = -1, y(1) = 1/2 and y''' = 0
    assert [solution.evaluate(f"y({t})") for t in x] == pytest.approx(0.5 - x + x**2, abs=1e-9)


# -- the printer ------------------------------------------------------------------------------

_LEAF = st.one_of(
    st.sampled_from(["_x", "_y0", "_y1"]),
    st.integers(-5, 5),
    st.floats(-4, 4, allow_nan=False, allow_infinity=False),
)
_UNARY = [op for op, (_, arity) in program.FUNCTIONS.items() if arity == 1]
_BINARY = [op for op, (_, arity) in program.FUNCTIONS.items() if arity == 2]


def _extend(inner):
    return st.one_of(
        st.tuples(st.sampled_from(["add", "mul"]), st.lists(inner, min_size=2, max_size=4))
        .map(lambda t: [t[0], *t[1]]),
        st.tuples(st.sampled_from(["div", "pow", *_BINARY]), inner, inner).map(list),
        st.tuples(st.sampled_from(["neg", *_UNARY]), inner).map(list),
    )


_TREES = st.recursive(_LEAF, _extend, max_leaves=12)

_OPERATOR = {"add": lambda a, b: a + b, "mul": lambda a, b: a * b, "div": lambda a, b: a / b,
             "pow": lambda a, b: a ** b}


def _evaluate(tree, values):
    """The meaning of a tree, computed from the tree itself (Python operators left to right,
    NumPy/SciPy functions): what the printed source must reproduce bit for bit."""
    if isinstance(tree, str):
        return values[tree]
    if not isinstance(tree, list):
        return tree
    op, *operands = tree
    args = [_evaluate(a, values) for a in operands]
    if op in _OPERATOR:
        result = args[0]
        for a in args[1:]:
            result = _OPERATOR[op](result, a)
        return result
    if op == "neg":
        return -args[0]
    name = program.FUNCTIONS[op][0]
    f = getattr(scipy.special, name) if name in ("erf", "erfc") else getattr(np, name)
    return f(*args)


def _number(node):
    if isinstance(node, list) and len(node) == 2 and node[0] == "neg":
        node = node[1]
    return type(node) if type(node) in (int, float) else None


def _python_arithmetic(tree):
    """Whether a tree asks for arithmetic on Python numbers: an operation of numbers alone
    (but a negated number), or a sum or product of two whole numbers."""
    if not isinstance(tree, list):
        return False
    op, *operands = tree
    kinds = [_number(a) for a in operands]
    if all(kinds) and not (op == "neg" and type(operands[0]) in (int, float)):
        return True
    if op in ("add", "mul") and kinds.count(int) > 1:
        return True
    return any(_python_arithmetic(a) for a in operands)


@settings(max_examples=300)  # cheap (a millisecond each); precedence slips need many shapes to show
@given(_TREES)
def test_printed_programs_compute_exactly_what_their_trees_mean(tree):
    x = np.array([0.3, 1.7, -2.5])
    y = np.array([[0.5, -1.25, 3.0], [2.0, 0.0, -0.75]])
    values = {"_x": x, "_y0": y[0], "_y1": y[1]}
    if _python_arithmetic(tree):  # its cost is not bounded by its size (3 ** 10**9): refused
        with pytest.raises(ProgramError, match="numbers alone|more than one whole number"):
            program.build([_quantity([tree])])
        return
    with np.errstate(all="ignore"):
        try:
            expected = np.zeros(3)
            expected[...] = _evaluate(tree, values)
        except (ArithmeticError, TypeError, Warning) as err:  # numbers alone: 1 / 0; (-1) ** 0.5 is complex
            with pytest.raises(type(err)):
                program.build([_quantity([tree])])["quantity"](x, y)
            return
        got = program.build([_quantity([tree])])["quantity"](x, y)[0]
    np.testing.assert_array_equal(got, expected)


def test_numbers_print_exactly_and_signs_bind_as_written():
    tree = ["add", ["neg", ["pow", "_x", 2]], ["pow", -2.0, "_y0"], 0.1, -1e-300, 2**53,
            ["neg", ["neg", "_y1"]], ["div", "_x", ["mul", "_y0", "_y1"]], ["pow", "_x", ["neg", 1]],
            ["pow", ["pow", "_x", "_y0"], "_y1"], ["pow", "_x", ["pow", "_y0", "_y1"]]]
    source = program.render(_quantity([tree]))
    assert "out[0] = -_x ** 2 + (-2.0) ** _y0 + 0.1 - 1e-300 + 9007199254740992 - -_y1 + _x / (_y0 * _y1) " \
           "+ _x ** -1 + (_x ** _y0) ** _y1 + _x ** _y0 ** _y1" in source
    x, y = np.array([1.5]), np.array([[2.0], [3.0]])
    expected = (-1.5**2 + (-2.0) ** 2.0 + 0.1 - 1e-300 + 2.0**53 + 3.0 + 1.5 / 6.0 + 1.5**-1
                + (1.5**2.0) ** 3.0 + 1.5 ** (2.0**3.0))
    assert program.build([_quantity([tree])])["quantity"](x, y)[0, 0] == expected  # IEEE, same order


def test_long_sums_are_grouped_for_pythons_compiler_and_stay_right():
    terms = [["mul", float(i), "_y0"] if i % 3 else ["neg", "_y1"] for i in range(5000)]
    function = program.build([_quantity([["add", *terms]])])["quantity"]
    y = np.array([[0.25], [2.0]])
    expected = sum(i for i in range(5000) if i % 3) * 0.25 - 2.0 * len(range(0, 5000, 3))  # analytic: the sum
    assert function(np.zeros(1), y)[0, 0] == pytest.approx(expected, rel=1e-12)


def test_the_deepest_tree_allowed_builds_and_one_level_more_is_refused():
    def nested(depth):
        tree = "_y0"
        for _ in range(depth):
            tree = ["sin", tree]
        return tree

    function = program.build([_quantity([nested(program.MAX_DEPTH)])])["quantity"]
    value = 0.5
    for _ in range(program.MAX_DEPTH):
        value = math.sin(value)
    assert function(np.zeros(1), np.array([[0.5], [0.0]]))[0, 0] == pytest.approx(value, rel=1e-14)
    with pytest.raises(ProgramError, match="nested more than 150 levels"):
        program.build([_quantity([nested(program.MAX_DEPTH + 1)])])


def test_a_real_system_program_passes_the_source_check_and_needs_no_attribute():
    import ast

    from bvpkit.programs import codegen

    problem = bvpkit.Problem(["y'' = -k*exp(y)*erf(y) + atan2(y, x + 1)"], ["y(0) = 0", "y(1) = abs(y'(1))"],
                             (0, 1), constants={"k": 0.5})
    from bvpkit.reduce.form import standard_form

    programs, _ = codegen._system_programs(standard_form(problem))
    source = "".join(program.render(q) for q in programs)
    tree = program.check_source(source)
    assert not any(isinstance(node, ast.Attribute | ast.Import | ast.ImportFrom) for node in ast.walk(tree))
    assert set(program.build(programs)) == {q["name"] for q in programs}


def test_codegen_names_what_it_cannot_express():
    import sympy as sp

    from bvpkit.programs import codegen
    from bvpkit.reduce.form import X

    with pytest.raises(ProgramError, match="cannot express Piecewise"):
        codegen._tree(sp.Piecewise((X, X > 0), (0, True)))
    with pytest.raises(ProgramError, match="cannot express gamma"):
        codegen._tree(sp.gamma(X))
    with pytest.raises(ProgramError, match="cannot hold the name 'L'"):
        codegen._tree(sp.Symbol("L") * X)
    with pytest.raises(ProgramError, match="complex value"):
        codegen._tree(sp.I * X)
    with pytest.raises(ProgramError, match="value zoo"):
        codegen._tree(sp.zoo * X)
