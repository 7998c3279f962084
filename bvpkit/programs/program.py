"""Generated functions as plain data ("programs"), and the one printer that turns them into code.

No text that bvpkit stores or ships is ever executed. What a cache file, a prepared problem
or a sweep unit carries is a *program*: the plain data of one generated function (nested
lists and dicts of a small fixed grammar, below). Python source is produced afresh, in
memory, from that data by :func:`render` each time a function is built; :func:`check_source`
then re-reads the rendered source with an allow-list over its syntax tree, and :func:`build`
compiles it in a namespace that holds only the NumPy/SciPy callables it names. A hostile
program can therefore at worst describe arithmetic on those functions, never code.

Program (one generated function)::

    {"name": "rhs",                                   # one of FUNCTION_NAMES
     "args": [["x", ["_x"]], ["y", ["_y0", "_y1"]],   # arguments and the symbols each unpacks
              ["p", []], ["k", ["_k0"]]],             #   (positional: _y0 = y[0], _y1 = y[1]; _x = x)
     "shape": [2],                                    # output shape before the mesh axis
     "mesh": "y",                                     # argument giving the trailing (mesh) shape, or None
     "temps": [["_t0", tree], ...],                   # shared subexpressions, named _t0, _t1, ... in order
     "entries": [[[1], tree], ...]}                   # output index -> tree (other entries are 0)

Tree::

    tree := number                     # int (|n| <= 2**53, not bool) or finite float
          | symbol                     # str: an unpacked argument symbol or an earlier temporary
          | [operation, tree, ...]     # operation from OPERATIONS or FUNCTIONS, with its arity

Anything else is refused with a :class:`~bvpkit.errors.ProgramError` naming what and where.

Python source is used as text only between :func:`render` and ``compile``, inside one call.
"""

from __future__ import annotations

import ast
import math
import re
from collections.abc import Callable, Iterable, Mapping
from typing import Any, NamedTuple

import numpy as np

from ..errors import ProgramError

# -- the grammar ------------------------------------------------------------------------------

#: Arithmetic: name -> number of operands (None: two or more, evaluated left to right).
OPERATIONS: dict[str, int | None] = {"add": None, "mul": None, "div": 2, "pow": 2, "neg": 1}

#: Functions: the expression language's (``expr.FUNCTIONS``) and what their derivatives need
#: (``sign`` for ``abs``; ``heaviside(u, value at 0)`` for ``min``/``max``). Name in a program
#: -> (name in the rendered source, number of operands).
FUNCTIONS: dict[str, tuple[str, int]] = {
    "exp": ("exp", 1), "log": ("log", 1), "sqrt": ("sqrt", 1),
    "sin": ("sin", 1), "cos": ("cos", 1), "tan": ("tan", 1),
    "sinh": ("sinh", 1), "cosh": ("cosh", 1), "tanh": ("tanh", 1),
    "asin": ("arcsin", 1), "acos": ("arccos", 1), "atan": ("arctan", 1),
    "asinh": ("arcsinh", 1), "acosh": ("arccosh", 1), "atanh": ("arctanh", 1),
    "atan2": ("arctan2", 2), "abs": ("absolute", 1), "erf": ("erf", 1), "erfc": ("erfc", 1),
    "min": ("minimum", 2), "max": ("maximum", 2), "sign": ("sign", 1), "heaviside": ("heaviside", 2),
}

#: The generated functions bvpkit builds (a system's ten, and a compiled expression).
FUNCTION_NAMES = frozenset({"rhs", "jac", "pjac", "kjac", "bc", "bc_jac_a", "bc_jac_b", "bc_jac_p", "bc_jac_k",
                            "singular_matrix", "region_maps", "quantity"})

#: Arguments and the symbol each position unpacks (``x`` is bound whole).
ARGUMENTS: dict[str, str] = {"x": "_x", "y": "_y{}", "ya": "_ya{}", "yb": "_yb{}", "p": "_p{}", "k": "_k{}",
                             "t": "_t_point{}"}

_ARGUMENT_SYMBOL = re.compile(r"_x|_(?:y|ya|yb|p|k)(?:0|[1-9]\d*)|_t_point(?:0|[1-9]\d*)")
_TEMPORARY = re.compile(r"_t(?:0|[1-9]\d*)")
#: Every internal symbol a program or the rendered source may name.
SYMBOL = re.compile(rf"(?:{_ARGUMENT_SYMBOL.pattern})|(?:{_TEMPORARY.pattern})")

# Limits. They bound the work a hostile program can cause; real programs are far below them.
MAX_DEPTH = 150  # tree levels. Python's tokenizer refuses more than 200 nested parentheses, and the
#   printer opens at most one per level. Real trees stay far below: SymPy's differentiation
#   itself runs out of recursion on expressions nested some 40 calls deep (about 120 levels)
MAX_NODES = 500_000  # tree nodes in one program: the largest of the bundled specs and benchmarks has 200
MAX_SYMBOLS = 10_000  # symbols one argument unpacks (states, parameters, constants, point values)
MAX_OUTPUT_SIZE = 1_000_000  # entries of the output before the mesh axis: a dense Jacobian of 1000 states
MAX_INTEGER = 2**53  # larger integers are written as floats by codegen (exact up to here)
MAX_STORED_NODES = 60_000  # tree nodes in all the programs of one cache entry, counted before any is
#   built: printing, checking and compiling cost about 40 microseconds a node (2 to 3 s at this
#   size on a shared machine), so a planted entry cannot cost more. The 600-state reacting chain
#   of benchmarks/scale.py has 9,000; a larger system is generated afresh each time, not read


# -- validation and printing ------------------------------------------------------------------

# Precedence of what the printer emits, as Python parses it (higher binds tighter).
_ADD, _MUL, _NEG, _POW, _ATOM = 1, 2, 3, 4, 5
# Python's own limits on the source it compiles: the tokenizer refuses more than 200 nested
# parentheses, and the compiler's recursion stops near 1000 levels of syntax tree (less
# inside a deep call stack). The printer stays well inside both and refuses beyond.
MAX_PARENTHESES = 150
MAX_SOURCE_DEPTH = 500
# A chain a + b + c ... is a left-leaning syntax tree as deep as it is long; longer chains are
# printed in parenthesised groups of this many operands (groups of groups for very long ones),
# evaluated left to right within each group.
CHAIN = 32


class _Part(NamedTuple):
    text: str
    precedence: int
    depth: int  # levels of Python syntax tree
    parentheses: int  # nested parentheses


def _where(program: Any) -> str:
    name = program.get("name") if isinstance(program, dict) else None
    return f"program '{name}'" if isinstance(name, str) and name in FUNCTION_NAMES else "program"


def _wrap(part: _Part, level: int) -> _Part:
    if part.precedence >= level:
        return part
    return _Part(f"({part.text})", _ATOM, part.depth, part.parentheses + 1)


def _chain(parts: list[tuple[str, _Part]], level: int) -> _Part:
    """``a + b - c ...`` (or ``*``) from ``(sign, part)`` pairs, left to right, in groups of CHAIN."""
    if len(parts) > CHAIN:
        sign = " + " if level == _ADD else " * "
        groups = []
        for i in range(0, len(parts), CHAIN):
            group = list(parts[i:i + CHAIN])
            if group[0][0] == " - ":  # the group starts with a subtraction: it starts with -b instead
                inner = _wrap(group[0][1], _NEG)
                group[0] = (sign, _Part(f"-{inner.text}", _NEG, inner.depth + 1, inner.parentheses))
            groups.append((sign, _chain(group, level)))
        return _chain(groups, level)
    first = _wrap(parts[0][1], level)
    text, depth, parentheses = first.text, first.depth, first.parentheses
    for sign, part in parts[1:]:
        part = _wrap(part, level + 1)
        text += sign + part.text
        depth = max(depth, part.depth) + 1
        parentheses = max(parentheses, part.parentheses)
    return _Part(text, level, depth, parentheses)


class _Printer:
    """Validates and prints one program; every node is checked before its text is made."""

    def __init__(self, program: Any):
        self.where = _where(program)
        self.nodes = 0
        self.used: set[str] = set()

    def fail(self, what: str) -> ProgramError:
        return ProgramError(f"{self.where}: {what}")

    def number(self, value: Any) -> _Part:
        if type(value) is int:
            if abs(value) > MAX_INTEGER:
                raise self.fail("an integer beyond 2**53 (write it as a float)")
        elif not math.isfinite(value):
            raise self.fail(f"the number {value!r} is not finite")
        text = repr(value)
        return _Part(text, _NEG, 2, 0) if text.startswith("-") else _Part(text, _ATOM, 1, 0)

    def tree(self, node: Any, known: set[str], depth: int = 0) -> _Part:
        """The validated text of a tree."""
        self.nodes += 1
        if self.nodes > MAX_NODES:
            raise self.fail(f"more than {MAX_NODES} nodes")
        if depth > MAX_DEPTH:
            raise self.fail(f"nested more than {MAX_DEPTH} levels deep")
        if type(node) in (int, float):
            return self.number(node)
        if type(node) is str:
            if not SYMBOL.fullmatch(node):
                raise self.fail(f"{_shown(node)} is not an internal symbol")
            if node not in known:
                raise self.fail(f"the symbol {node} is used before it is defined")
            self.used.add(node)
            return _Part(node, _ATOM, 1, 0)
        if type(node) is not list or not node:
            raise self.fail(f"{_kind(node)} where a number, a symbol or an operation belongs")
        op, operands = node[0], node[1:]
        if type(op) is not str or (op not in OPERATIONS and op not in FUNCTIONS):
            raise self.fail(f"unknown operation {_shown(op)}")
        arity = OPERATIONS[op] if op in OPERATIONS else FUNCTIONS[op][1]
        if (arity is None and len(operands) < 2) or (arity is not None and len(operands) != arity):
            wanted = "two or more" if arity is None else str(arity)
            raise self.fail(f"'{op}' takes {wanted} operands, got {len(operands)}")
        # What a program may cost is bounded by its size only if no arithmetic is done on
        # Python numbers (an integer power such as 3**1000000000 runs for minutes, 1.0/0.0
        # raises): codegen folds every constant into one number, so an operation always has
        # an operand that comes from an argument (a NumPy value), and a sum or product holds
        # at most one whole number.
        constant = [_constant(item) for item in operands]
        if all(constant) and not (op == "neg" and type(operands[0]) in (int, float)):
            raise self.fail(f"'{op}' of numbers alone (a program holds each constant as one number)")
        if op in ("add", "mul") and sum(_constant(item) is int for item in operands) > 1:
            raise self.fail(f"'{op}' of more than one whole number (a program holds each constant as one number)")
        if op in ("add", "mul"):
            level, sign = (_ADD, " + ") if op == "add" else (_MUL, " * ")
            parts = [(sign, self.tree(operands[0], known, depth + 1))]
            for item in operands[1:]:
                # a + (-b) and a - b are the same IEEE operation; the latter reads better
                if op == "add" and type(item) is list and len(item) == 2 and item[0] == "neg":
                    self.nodes += 1
                    parts.append((" - ", self.tree(item[1], known, depth + 2)))
                elif op == "add" and type(item) in (int, float) and self.number(item).text.startswith("-"):
                    self.nodes += 1
                    parts.append((" - ", self.number(-item)))
                else:
                    parts.append((sign, self.tree(item, known, depth + 1)))
            return _chain(parts, level)
        parts = [self.tree(item, known, depth + 1) for item in operands]
        if op in FUNCTIONS:
            text = f"{FUNCTIONS[op][0]}({', '.join(part.text for part in parts)})"
            return _Part(text, _ATOM, 1 + max(p.depth for p in parts), 1 + max(p.parentheses for p in parts))
        if op == "neg":
            inner = _wrap(parts[0], _NEG)
            return _Part(f"-{inner.text}", _NEG, inner.depth + 1, inner.parentheses)
        if op == "pow":  # right-associative; Python allows a unary minus in the exponent
            left, right, text, level = _wrap(parts[0], _POW + 1), _wrap(parts[1], _NEG), " ** ", _POW
        else:  # div
            left, right, text, level = _wrap(parts[0], _MUL), _wrap(parts[1], _MUL + 1), " / ", _MUL
        return _Part(left.text + text + right.text, level, 1 + max(left.depth, right.depth),
                     max(left.parentheses, right.parentheses))

    def statement(self, target: str, node: Any, known: set[str]) -> str:
        part = self.tree(node, known)
        if part.depth > MAX_SOURCE_DEPTH or part.parentheses > MAX_PARENTHESES:
            raise self.fail(f"the expression for {target} is too deeply nested for Python's compiler "
                            f"({part.depth} levels, {part.parentheses} parentheses; at most "
                            f"{MAX_SOURCE_DEPTH} and {MAX_PARENTHESES})")
        return f"    {target} = {part.text}"

    def function(self, program: Any) -> str:
        if type(program) is not dict:
            raise self.fail(f"{_kind(program)} where a program (a mapping) belongs")
        extra = set(program) - {"name", "args", "shape", "mesh", "temps", "entries"}
        if extra:
            raise self.fail(f"unknown field {_shown(sorted(map(str, extra))[0])}")
        name = program.get("name")
        if type(name) is not str or name not in FUNCTION_NAMES:
            raise self.fail(f"unknown function name {_shown(name)}")
        args = program.get("args")
        if type(args) is not list or not 1 <= len(args) <= len(ARGUMENTS):
            raise self.fail("'args' must list one to seven arguments")
        names, known, lines = [], set(), []
        for arg in args:
            if type(arg) is not list or len(arg) != 2 or type(arg[0]) is not str or type(arg[1]) is not list:
                raise self.fail("each argument must be [name, [symbols]]")
            arg_name, symbols = arg
            if arg_name not in ARGUMENTS or arg_name in names:
                raise self.fail(f"unknown or repeated argument {_shown(arg_name)}")
            if len(symbols) > MAX_SYMBOLS or (arg_name == "x" and symbols != ["_x"]):
                raise self.fail(f"argument '{arg_name}' unpacks a wrong list of symbols")
            for i, symbol in enumerate(symbols):
                if symbol != ARGUMENTS[arg_name].format(i):
                    raise self.fail(f"argument '{arg_name}' position {i} must unpack "
                                    f"{ARGUMENTS[arg_name].format(i)}, not {_shown(symbol)}")
            names.append(arg_name)
            known.update(symbols)
        shape = program.get("shape")
        if (type(shape) is not list or not 1 <= len(shape) <= 2
                or any(type(d) is not int or not 0 <= d <= MAX_OUTPUT_SIZE for d in shape)
                or math.prod(shape) > MAX_OUTPUT_SIZE):
            raise self.fail(f"'shape' must be one or two sizes with at most {MAX_OUTPUT_SIZE} entries")
        mesh = program.get("mesh")
        if mesh is not None and (type(mesh) is not str or mesh not in names or "x" not in names):
            raise self.fail("'mesh' must be None or the name of an argument (with 'x' among them)")
        temps, entries = program.get("temps"), program.get("entries")
        if type(temps) is not list or type(entries) is not list:
            raise self.fail("'temps' and 'entries' must be lists")
        body = []
        for i, temp in enumerate(temps):
            if type(temp) is not list or len(temp) != 2 or temp[0] != f"_t{i}":
                raise self.fail(f"temporary {i} must be [\"_t{i}\", tree]")
            if _constant(temp[1]):
                raise self.fail(f"temporary {i} is a number alone (it would carry Python arithmetic)")
            body.append(self.statement(f"_t{i}", temp[1], known))
            known.add(f"_t{i}")
        seen = set()
        for entry in entries:
            if type(entry) is not list or len(entry) != 2 or type(entry[0]) is not list:
                raise self.fail("each entry must be [[index, ...], tree]")
            index = entry[0]
            if (len(index) != len(shape) or tuple(index) in seen
                    or any(type(i) is not int or not 0 <= i < d for i, d in zip(index, shape))):
                raise self.fail(f"entry index {_shown(index)} is outside the shape {shape}, or repeated")
            seen.add(tuple(index))
            body.append(self.statement(f"out[{', '.join(map(str, index))}]", entry[1], known))
        lines.append(f"def {name}({', '.join(names)}):")
        for arg_name, symbols in args:
            for i, symbol in enumerate(symbols):
                if symbol in self.used:
                    whole = arg_name == "x"
                    lines.append(f"    {symbol} = {arg_name}" if whole else f"    {symbol} = {arg_name}[{i}]")
        if mesh is None:
            lines.append(f"    out = zeros({tuple(shape)!r})")
        else:
            lines.append(f"    mesh = broadcast_shapes(shape(x), shape({mesh}[0]))")
            lines.append(f"    out = zeros({tuple(shape)!r} + mesh)")
        lines += body
        lines.append("    return out")
        return "\n".join(lines) + "\n"


def _constant(node: Any) -> type | None:
    """``int`` or ``float`` for a number or the negation of one, else None."""
    if type(node) is list and len(node) == 2 and node[0] == "neg":
        node = node[1]
    return type(node) if type(node) in (int, float) else None


def _shown(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _kind(value: Any) -> str:
    return "an empty list" if value == [] else f"a {type(value).__name__} ({_shown(value)})"


def stored_size(programs: Iterable[Any], limit: int = MAX_STORED_NODES) -> int:
    """The number of tree nodes in ``programs`` (plain data as read from a cache), counted
    without recursion and stopping past ``limit``; a :class:`~bvpkit.errors.ProgramError`
    when there are more (nothing is built from them)."""
    count, stack = 0, []
    for program in programs:
        if type(program) is not dict:
            continue  # the grammar refuses it when built
        for part in ("temps", "entries"):
            items = program.get(part)
            if type(items) is list:
                stack += [item[1] for item in items if type(item) is list and len(item) == 2]
    while stack:
        node = stack.pop()
        count += 1
        if count > limit:
            raise ProgramError(f"it holds more than {limit} terms (a larger system is generated afresh)")
        if type(node) is list:
            stack += node[1:]
    return count


def validate(program: Any) -> None:
    """Raise :class:`~bvpkit.errors.ProgramError` unless ``program`` is within the grammar."""
    _Printer(program).function(program)


def render(program: Mapping[str, Any]) -> str:
    """The Python source of one program (validated node by node as it is printed).

    Numbers are printed with ``repr`` (exact round trip of a float); every operation is
    printed with the parentheses Python's precedence needs, operands left to right.
    """
    return _Printer(program).function(program)


# -- the check of rendered source -------------------------------------------------------------

#: Callables the rendered source may call, with their number of arguments. They are bound to
#: these short names in the namespace of :func:`build`, so the source needs no attribute access
#: at all (one rule, "no attributes", is easier to audit than a list of allowed paths).
_FRAME = {"zeros": 1, "shape": 1, "broadcast_shapes": 2}
CALLABLES: dict[str, int] = {**{source: arity for source, arity in FUNCTIONS.values()}, **_FRAME}
_NAMES = frozenset({*ARGUMENTS, "out", "mesh"})  # plain local names besides the internal symbols
_STORE = frozenset({"out", "mesh"})
_BINARY = (ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow)


class _SourceCheck:
    """Deny by default: each node type the printer emits is accepted in its place only."""

    def __init__(self) -> None:
        self.called: set[str] = set()  # the callables the source names (bound by build)

    @staticmethod
    def fail(node: ast.AST, what: str) -> ProgramError:
        return ProgramError(f"generated source refused at line {getattr(node, 'lineno', '?')}: {what}")

    def module(self, tree: ast.AST) -> None:
        if type(tree) is not ast.Module or tree.type_ignores:
            raise self.fail(tree, "not a module")
        for item in tree.body:
            self.function(item)

    def function(self, node: ast.AST) -> None:
        if type(node) is not ast.FunctionDef:
            raise self.fail(node, f"{type(node).__name__} at the top level (only function definitions)")
        if (node.name not in FUNCTION_NAMES or node.decorator_list or node.returns or node.type_comment
                or getattr(node, "type_params", None)):
            raise self.fail(node, f"function {node.name!r} (or its decorators or annotations)")
        a = node.args
        if a.posonlyargs or a.vararg or a.kwonlyargs or a.kw_defaults or a.kwarg or a.defaults:
            raise self.fail(node, "only plain positional arguments are allowed")
        for arg in a.args:
            if arg.arg not in ARGUMENTS or arg.annotation or arg.type_comment:
                raise self.fail(arg, f"argument {arg.arg!r}")
        if not node.body or type(node.body[-1]) is not ast.Return:
            raise self.fail(node, "a function must end with 'return out'")
        for statement in node.body[:-1]:
            self.statement(statement)
        last = node.body[-1]
        if type(last.value) is not ast.Name or last.value.id != "out":
            raise self.fail(last, "only 'return out' is allowed")

    def statement(self, node: ast.AST) -> None:
        if type(node) is not ast.Assign or len(node.targets) != 1 or node.type_comment:
            raise self.fail(node, f"{type(node).__name__} (only single assignments)")
        target = node.targets[0]
        if type(target) is ast.Name:
            if not (target.id in _STORE or SYMBOL.fullmatch(target.id)) or type(target.ctx) is not ast.Store:
                raise self.fail(target, f"assignment to {target.id!r}")
        elif type(target) is ast.Subscript:
            if type(target.value) is not ast.Name or target.value.id != "out" or not self.index(target.slice):
                raise self.fail(target, "only entries of 'out' with whole-number indexes can be assigned")
        else:
            raise self.fail(target, f"assignment to a {type(target).__name__}")
        self.expression(node.value)

    @staticmethod
    def index(node: ast.AST) -> bool:
        items = node.elts if type(node) is ast.Tuple else [node]
        return bool(items) and all(type(i) is ast.Constant and type(i.value) is int and i.value >= 0
                                   for i in items)

    def expression(self, root: ast.AST) -> None:
        stack = [root]  # iterative: the depth of a hostile tree must not matter here
        while stack:
            node = stack.pop()
            kind = type(node)
            if kind is ast.Constant:
                value = node.value
                if not ((type(value) is int and abs(value) <= MAX_INTEGER)
                        or (type(value) is float and math.isfinite(value))):
                    raise self.fail(node, f"the constant {_shown(value)} (only finite numbers)")
            elif kind is ast.Name:
                if type(node.ctx) is not ast.Load or "__" in node.id or not (
                        node.id in _NAMES or SYMBOL.fullmatch(node.id)):
                    raise self.fail(node, f"the name {node.id!r}")
            elif kind is ast.BinOp:
                if type(node.op) not in _BINARY:
                    raise self.fail(node, f"the operator {type(node.op).__name__}")
                stack += [node.left, node.right]
            elif kind is ast.UnaryOp:
                if type(node.op) is not ast.USub:
                    raise self.fail(node, f"the operator {type(node.op).__name__}")
                stack.append(node.operand)
            elif kind is ast.Call:
                f = node.func
                if type(f) is not ast.Name or f.id not in CALLABLES or type(f.ctx) is not ast.Load:
                    raise self.fail(node, "a call of something other than an allowed function")
                if node.keywords or len(node.args) != CALLABLES[f.id]:
                    raise self.fail(node, f"{f.id} takes {CALLABLES[f.id]} positional argument(s), "
                                          "no keywords")
                self.called.add(f.id)
                stack += node.args
            elif kind is ast.Subscript:
                value = node.value
                if (type(value) is not ast.Name or value.id not in ARGUMENTS or type(node.ctx) is not ast.Load
                        or type(node.slice) is not ast.Constant or not self.index(node.slice)):
                    raise self.fail(node, "only arguments can be indexed, by a whole number")
            elif kind is ast.Tuple:
                if type(node.ctx) is not ast.Load or not all(
                        type(i) is ast.Constant and type(i.value) is int and 0 <= i.value <= MAX_OUTPUT_SIZE
                        for i in node.elts):
                    raise self.fail(node, "a tuple of anything but sizes")
            else:
                raise self.fail(node, f"{kind.__name__} is not allowed")


def check_source(source: str) -> ast.Module:
    """Parse ``source`` and refuse it unless every node is one the printer emits; return the tree.

    Allowed: function definitions named in :data:`FUNCTION_NAMES` with plain positional
    arguments named in :data:`ARGUMENTS`; single assignments to internal symbols, ``mesh``,
    ``out`` or ``out[i, j]`` (whole-number indexes); ``return out``; finite int and float
    constants; names of arguments, internal symbols (:data:`SYMBOL`), ``out``, ``mesh``;
    ``+ - * / **`` and unary minus; calls, without keywords and with their fixed number of
    arguments, of the names in :data:`CALLABLES` only; an argument indexed by a whole number;
    tuples of sizes. Nothing else: no attributes, strings, subscripts of anything but the
    arguments, imports, lambdas, comprehensions, keywords, dunder names.
    """
    return _checked(source)[0]


def _checked(source: str) -> tuple[ast.Module, set[str]]:
    """:func:`check_source`, and the names of the callables the source calls."""
    if not isinstance(source, str):
        raise ProgramError(f"generated source must be text, got {type(source).__name__}")
    try:
        tree = ast.parse(source, "<bvpkit-generated>", "exec")
    except (SyntaxError, ValueError, RecursionError, MemoryError) as err:
        raise ProgramError(f"generated source refused: it does not parse ({type(err).__name__})") from None
    checker = _SourceCheck()
    checker.module(tree)
    return tree, checker.called


def _callables(names: Iterable[str]) -> dict[str, Callable]:
    """The NumPy/SciPy callables behind ``names`` (scipy.special only when erf/erfc is used)."""
    out: dict[str, Callable] = {}
    for name in names:
        if name in ("erf", "erfc"):
            import scipy.special  # imported on first use: it costs start-up time

            out[name] = scipy.special.erf if name == "erf" else scipy.special.erfc
        else:
            out[name] = _NUMPY[name]
    return out


_NUMPY: dict[str, Callable] = {
    "exp": np.exp, "log": np.log, "sqrt": np.sqrt, "sin": np.sin, "cos": np.cos, "tan": np.tan,
    "sinh": np.sinh, "cosh": np.cosh, "tanh": np.tanh, "arcsin": np.arcsin, "arccos": np.arccos,
    "arctan": np.arctan, "arcsinh": np.arcsinh, "arccosh": np.arccosh, "arctanh": np.arctanh,
    "arctan2": np.arctan2, "absolute": np.absolute, "minimum": np.minimum, "maximum": np.maximum,
    "sign": np.sign, "heaviside": np.heaviside, "zeros": np.zeros, "shape": np.shape,
    "broadcast_shapes": np.broadcast_shapes,
}


def build(programs: Iterable[Mapping[str, Any]]) -> dict[str, Callable]:
    """The callables of ``programs``, by name: rendered, checked, compiled.

    Raises
    ------
    ProgramError
        A program outside the grammar, or rendered source the check refuses (the latter
        would be a bug of the printer), or two programs of the same name.
    """
    if isinstance(programs, Mapping):
        raise ProgramError("build takes a list of programs, not one program")
    sources, names = [], []
    for program in programs:
        sources.append(render(program))
        names.append(program["name"])
    if len(set(names)) != len(names):
        raise ProgramError(f"two programs share a name among {names}")
    tree, used = _checked("".join(sources))
    namespace: dict[str, Any] = {"__builtins__": {}, **_callables(used)}
    # The source was printed from validated plain data just now and passed check_source:
    # it names nothing but its arguments, internal symbols and the callables bound above.
    exec(compile(tree, "<bvpkit-generated>", "exec"), namespace)  # noqa: S102
    return {name: namespace[name] for name in names}
