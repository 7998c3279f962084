"""The prepared problem: a problem in the standard form, as plain data, ready to solve.

:func:`prepare` does SymPy's work once per problem structure (the reduction to the standard
form, code generation, the guess recipes, the outputs) and hands back a :class:`Prepared`:
plain data (the state layout, the generated code of the system and of the outputs, guess
recipes, the values of the constants and parameter guesses, and the facts the map back to
the user's variable and states needs). ``solve``, ``trace``, ``sweep``, sweep workers and the
disk cache all take it; none of them imports SymPy for it.

``with_constants`` swaps values without new code, and checks them like values written in
the file (ends and interfaces in order, finite): the one place every value reaching a
solve passes (:func:`bvpkit.language.problem.check_positions`).

A second ``bvpkit solve`` of the same spec file takes the preparation from the disk cache
(:func:`cached`, :func:`remember`), keyed by the spec file's text, the ``--set`` values and
the bvpkit code (``compiled.code_stamp``). A cache file is written atomically and signed with
the cache's key (``compiled.signing_key``); it is read with the checks of
``compiled.read_private`` (a private folder, a regular file of the user's, a size cap), and
used only for the spec text and values it was made for, after the checks of :func:`cached`.
One that is unreadable, damaged, unsigned, refused or from other code is ignored and
rewritten. Generated functions travel as programs (plain data, :mod:`bvpkit.programs.program`), never
as code: they are printed and checked afresh when built.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import BvpkitError, OptionError, ProblemError, closest
from ..language.options import SolveOptions
from ..language.problem import Problem, _numbers, check_positions
from ..programs.compiled import (
    _MEMORY,
    CompiledSystem,
    _cache_dir,
    assemble,
    code_stamp,
    note,
    quantity_function,
    read_json,
    write_json,
)
from ..programs.layout import StateLayout
from ..programs.program import stored_size
from . import classes  # noqa: F401 - registers the problem classes, for reading them back
from .guess import GuessRecipe
from .mapping import positions
from .quantity import Quantity
from .transform import Transform


@dataclass(frozen=True)
class Prepared:
    """A problem ready to solve (see the module docstring); plain data only.

    Attributes
    ----------
    facts : dict
        What the problem says, as plain data: ``title``, ``independent``, ``unknowns``,
        ``orders``, ``outputs`` (name -> text), ``settings``, ``arguments`` (to rebuild the
        symbolic problem on demand), ``points`` (ends and interfaces as written), ``own``
        (region values of constants), ``key``.
    layout : StateLayout
    system : dict
        The compiled system as plain data: generated ``programs`` (:mod:`bvpkit.programs.program`),
        Jacobian ``pattern``, and condition ``sides``.
    recipes : dict of str to GuessRecipe
    quantities : dict of str to Quantity
        The outputs (and other expressions prepared with them), compiled.
    constants : dict of str to float
        Values of the problem's constants.
    parameters : dict of str to float
        Guesses of the unknown parameters (the eigenvalue's is 0: it comes from a
        discretised eigenproblem).
    transforms : tuple of Transform
        The problem's classes (:mod:`bvpkit.reduce.transform`): the driver, continuation and
        settling call their hooks.
    """

    facts: dict
    layout: StateLayout
    system: dict
    recipes: dict
    quantities: dict
    constants: dict
    parameters: dict = field(default_factory=dict)
    transforms: tuple = ()

    # -- what the numerical side asks -------------------------------------------------------
    @property
    def compiled(self) -> CompiledSystem:
        found = _MEMORY.get(self.layout.key)
        if found is None:
            s = self.system
            found = assemble(self.layout, s["programs"], np.array(s["pattern"], dtype=bool), np.array(s["sides"], dtype=int))
        return found

    @property
    def title(self) -> str:
        return self.facts["title"]

    @property
    def independent(self) -> str:
        return self.facts["independent"]

    @property
    def outputs(self) -> dict[str, str]:
        return dict(self.facts["outputs"])

    @property
    def settings(self) -> dict[str, Any]:
        return dict(self.facts["settings"])

    @property
    def options(self) -> SolveOptions:
        """The solver's settings of the problem (a spec's ``[solver]``), as typed options."""
        return SolveOptions.make(self.facts["settings"])

    @property
    def truncated(self) -> bool:
        """Whether the domain solved on is a truncation of the problem's (an infinite end)."""
        ends = [0.0, 1.0]
        for t in self.transforms:
            ends = t.ends(ends)
        return ends != [0.0, 1.0]

    @property
    def needs(self) -> frozenset[str]:
        """What a method must take to solve this problem (its classes' needs)."""
        return frozenset().union(*(t.needs for t in self.transforms))

    @property
    def orders(self) -> dict[str, int]:
        return dict(self.layout.functions)

    def k(self, options: Any = None) -> np.ndarray:
        """The constants' values in the order of the compiled ``k``: the problem's, each
        region's own, and those the classes add for the solve's ``options`` (their defaults
        when None)."""
        own = {**self.facts["own"]}
        for t in self.transforms:
            own.update(t.constants(options))
        values = []
        for name in self.layout.constants:
            values.append(own[name] if name in own else self.constants[name])
        return np.array(values, dtype=float)

    def p0(self) -> np.ndarray:
        return np.array([self.parameters.get(q, 0.0) for q in self.layout.parameters], dtype=float)

    # -- new values --------------------------------------------------------------------------
    def with_constants(self, **values: float) -> Prepared:
        """The same problem with other values of some constants (no new code); checked like
        values in the file."""

        missing = [k for k in values if k not in self.constants]
        if missing:
            from ..language.problem import _not_a_constant

            raise ProblemError(_not_a_constant(missing[0], self.constants, self.parameters))
        new = dataclasses.replace(self, constants={**self.constants, **_numbers(values, "constant", names_known=True)})
        new.check()
        return new

    def with_parameters(self, **values: float) -> Prepared:
        """The same problem with other guesses of its unknown parameters."""
        missing = [k for k in values if k not in self.parameters]
        if missing:
            raise OptionError(f"'{missing[0]}' is not an unknown parameter{closest(missing[0], self.parameters)}")
        return dataclasses.replace(self, parameters={**self.parameters, **_numbers(values, "unknown parameter",
                                                                                     names_known=True)})

    def check(self, p: np.ndarray | None = None, k: np.ndarray | None = None) -> None:
        """Ends and interfaces in order and finite for these values (the one check of values)."""
        with np.errstate(all="ignore"):
            maps = np.asarray(self.compiled.maps(self.p0() if p is None else p, self.k() if k is None else k), float)
        values = list(positions(maps))
        for t in self.transforms:
            values = t.ends(values)
        check_positions(values, self.facts["points"], self.independent)

    # -- expressions -------------------------------------------------------------------------
    def quantity(self, text: str) -> Quantity:
        """An expression of the solution, compiled (from the preparation, or now, with SymPy)."""
        found = self.quantities.get(text) or _QUANTITIES.get((self.facts["key"], text))
        if found is None:
            from .form import standard_form
            from .quantity import compile_quantity

            problem = self.problem()
            found = compile_quantity(problem, standard_form(problem), text)
            if len(_QUANTITIES) > 2_000:
                _QUANTITIES.clear()
            _QUANTITIES[(self.facts["key"], text)] = found
        return found

    def recipe(self, name: str, expression: Any) -> GuessRecipe:
        """A guess expression for ``name`` given at solve time, as a recipe (SymPy's work)."""
        from .form import standard_form
        from .guess import expression_recipe

        problem = self.problem()
        parsed = problem._guesses({name: expression})[name]
        return expression_recipe(problem, standard_form(problem), name, parsed)

    def problem(self):  # noqa: ANN201 - a bvpkit.Problem
        """The symbolic problem (rebuilt from its arguments on first need, with SymPy)."""
        found = _PROBLEMS.get(self.facts["key"])
        if found is None:

            arguments = dict(self.facts["arguments"])
            found = Problem(**arguments)
            _PROBLEMS[self.facts["key"]] = found
        return found.with_constants(**self.constants) if found.constants != self.constants else found

    # -- plain data ---------------------------------------------------------------------------
    def plain(self) -> dict[str, Any]:
        return {"facts": self.facts, "layout": self.layout.as_dict(), "system": self.system,
                "recipes": {k: r.plain() for k, r in self.recipes.items()},
                "quantities": {k: q.plain() for k, q in self.quantities.items()},
                "constants": self.constants, "parameters": self.parameters,
                "transforms": [t.plain() for t in self.transforms]}

    @classmethod
    def from_plain(cls, data: Mapping[str, Any]) -> Prepared:
        return cls(
            facts=dict(data["facts"]),
            layout=StateLayout.from_dict(data["layout"]),
            system=dict(data["system"]),
            recipes={k: GuessRecipe.from_plain(r) for k, r in data["recipes"].items()},
            quantities={k: Quantity.from_plain(q) for k, q in data["quantities"].items()},
            constants={k: float(v) for k, v in data["constants"].items()},
            parameters={k: float(v) for k, v in data["parameters"].items()},
            transforms=tuple(Transform.from_plain(t) for t in data["transforms"]),
        )

    def __repr__(self) -> str:
        return f"<Prepared {self.facts.get('title') or self.layout.row_names}>"


_PREPARED: dict[str, Prepared] = {}
_PROBLEMS: dict[str, Any] = {}
_QUANTITIES: dict[tuple[str, str], Quantity] = {}


def prepare(problem) -> Prepared:  # noqa: ANN001 - a bvpkit.Problem
    """The prepared problem of ``problem`` (SymPy's work done once per problem structure).

    ``bvpkit.solve``, ``trace`` and ``sweep`` call it; call it yourself to solve many
    variations of one problem without touching SymPy again (``prepared.with_constants``).
    """

    if isinstance(problem, Prepared):
        return problem
    if not isinstance(problem, Problem):
        raise OptionError(f"expected a bvpkit.Problem, got {type(problem).__name__}")
    key = problem.key(generated=True)
    template = _PREPARED.get(key)
    if template is None:
        from ..language.budget import preparation

        with preparation("preparing the problem (code generation, guesses, outputs)",
                         advice="simplify the equations, or split them with added unknown functions"):
            template = _prepare(problem, key)
        if len(_PREPARED) > 200:
            _PREPARED.clear()
        _PREPARED[key] = template
        _PROBLEMS.setdefault(key, problem)
    facts = {**template.facts, "title": problem.title, "settings": dict(problem.settings),
             "arguments": _plain_arguments(problem), "own": _own(problem)}
    return dataclasses.replace(template, facts=facts, constants=dict(problem.constants),
                               parameters=_parameters(problem))


def _own(problem) -> dict[str, float]:  # noqa: ANN001
    return {f"{name}@{r + 1}": float(value) for r, region in enumerate(problem.regions)
            for name, value in region.constants.items()}


def _parameters(problem) -> dict[str, float]:  # noqa: ANN001
    values = dict(problem.unknown_parameters)
    if problem.eigenvalue:
        values[problem.eigenvalue] = 0.0
    return values


def _plain_arguments(problem) -> dict[str, Any]:  # noqa: ANN001
    """The problem's arguments, with the values of its constants as they are now."""
    return {**problem.arguments, "constants": dict(problem.constants)}


def _prepare(problem, key: str) -> Prepared:  # noqa: ANN001
    from ..programs.codegen import compile_system
    from .form import standard_form
    from .guess import guess_recipes
    from .quantity import compile_quantity

    form = standard_form(problem)
    compiled = compile_system(form)
    facts = {
        "key": key, "title": problem.title, "independent": problem.independent, "unknowns": list(problem.unknowns),
        "outputs": dict(problem.outputs), "settings": dict(problem.settings), "arguments": _plain_arguments(problem),
        "points": problem.point_labels, "own": _own(problem),
    }
    system = {"programs": list(compiled.programs), "pattern": compiled.jac_pattern.tolist(),
              "sides": compiled.bc_sides.tolist()}
    quantities = {text: compile_quantity(problem, form, text) for text in problem.outputs.values()}
    return Prepared(facts, compiled.layout, system, guess_recipes(problem, form), quantities,
                    dict(problem.constants), _parameters(problem), form.transforms)


# -- the disk cache of spec files' preparations --------------------------------------------------
_KIND = "problem"


def spec_key(text: str, overrides: Mapping[str, float]) -> str:
    """Key of a spec's text (as :func:`bvpkit.io.specfile.read_spec` read it) with ``--set`` values."""
    digest = hashlib.sha256()
    digest.update(code_stamp().encode())
    digest.update(b"\0" + text.encode("utf-8", "surrogatepass") + b"\0")
    digest.update(json.dumps(sorted(overrides.items())).encode())
    return digest.hexdigest()[:32]


def _file(key: str) -> Path | None:
    folder = _cache_dir()
    return None if folder is None else folder / f"{_KIND}-{key}-{code_stamp()}.json"


def _given(overrides: Mapping[str, float]) -> list:
    return [[k, float(v)] for k, v in sorted(overrides.items())]


def cached(key: str, text: str, overrides: Mapping[str, float]) -> Prepared | None:
    """The preparation kept under ``key`` (no SymPy), or None: missing, skipped or damaged,
    or made for another problem.

    An entry carries the text of the spec and the ``--set`` values it was made for, and is
    used for that text and those values only. What the spec says as given (title, settings,
    the files to write, constants, parameter guesses, the arguments that rebuild the problem)
    is read from ``text`` itself (:func:`bvpkit.io.specfile.spec_facts`) and must agree with the
    entry; the rest (layout, programs, recipes, outputs) is checked for shape and consistency
    (:func:`_check_entry`) and built before it is used. Anything else: one note, and None.
    """
    from ..io.specfile import spec_facts

    path = _file(key)
    if path is None:
        return None
    body = read_json(path)
    if body is None:
        return None
    try:
        if type(body) is not dict or body.get("key") != key:
            raise _Refused("it does not hold what its name says")
        if body.get("spec") != text or body.get("set") != _given(overrides):
            raise _Refused("it was made for another spec or other --set values")
        given = spec_facts(text, overrides)
        if given is None:
            raise _Refused("the spec does not read as the one it was made for")
        prepared = Prepared.from_plain(body["prepared"])
        system = prepared.system.get("programs")
        stored_size([*(system if type(system) is list else []),
                     *(r.program for r in prepared.recipes.values()), *_programs(prepared.quantities.values())])
        mine = {"title": prepared.facts.get("title"), "settings": prepared.facts.get("settings"),
                "arguments": prepared.facts.get("arguments"), "own": prepared.facts.get("own"),
                "outputs": prepared.facts.get("outputs"), "constants": prepared.constants,
                "parameters": prepared.parameters}
        if _canonical(mine) != _canonical({name: given[name] for name in mine}):
            raise _Refused("what it holds of the spec (a value, a setting or a file name) differs from the spec")
        # bound to this spec by name, whatever the entry says: memos of this process are keyed by it
        facts = {**prepared.facts, **{name: given[name] for name in ("title", "settings", "arguments", "own",
                                                                     "outputs")}, "key": f"spec-{key}"}
        layout = dataclasses.replace(prepared.layout, key=f"spec-{key}")
        prepared = dataclasses.replace(prepared, facts=facts, layout=layout, constants=dict(given["constants"]),
                                       parameters=dict(given["parameters"]))
        _check_entry(prepared)
        # every program is validated and built now, not in the middle of a solve, and kept
        # where the solve looks for it (built once)
        for program in [*(r.program for r in prepared.recipes.values() if r.program is not None),
                        *_programs(prepared.quantities.values())]:
            if type(program) is not dict or program.get("name") != "quantity":
                raise _Refused("a compiled output or guess is not a program of one")
            quantity_function(program)
        prepared.compiled  # noqa: B018 - builds the system's programs now
        prepared.check()
        return prepared
    except _Refused as err:
        note(f"cache entry {path.name} skipped: {err}")
    except (ValueError, KeyError, TypeError, IndexError, AttributeError, RecursionError, OverflowError) as err:
        why = err.one_line() if isinstance(err, BvpkitError) else "it does not hold a preparation"
        note(f"cache entry {path.name} skipped: {why}")
    return None


_KINDS = frozenset({"given", "continuity", "added", "phase"})
MAX_ENTRY_STATES = 100_000  # rows of Y a kept preparation may describe (a dense Jacobian of 1000 states
#   is the largest the program grammar allows; this bounds what is sized before any program is read)


def _check_entry(prepared: Prepared) -> None:
    """Refuse (``_Refused``) a preparation read from disk whose parts do not fit together: the
    layout, the programs' arguments and shapes, the recipes and the outputs. Cheap: sizes and
    indexes only, checked before anything is sized or built from them."""
    layout = prepared.layout

    def whole(value: Any, low: int, high: int) -> bool:
        return type(value) is int and low <= value <= high

    def names(items: Any) -> bool:
        return all(type(v) is str for v in items) and len(set(items)) == len(items)

    states, functions = list(layout.states), list(layout.functions)
    if not (functions and names([f for f, _ in functions]) and all(whole(k, 1, 1000) for _, k in functions)
            and whole(layout.users, 1, MAX_ENTRY_STATES) and whole(layout.regions, 1, MAX_ENTRY_STATES)
            and layout.users == sum(k for _, k in functions) and len(states) >= layout.users
            and states[:layout.users] == [(f, j) for f, k in functions for j in range(k)]
            and all(type(f) is str and whole(j, 0, 0) for f, j in states[layout.users:])
            and layout.n <= MAX_ENTRY_STATES):
        raise _Refused("its state layout does not fit together")
    n_p, n_k = len(layout.parameters), len(layout.constants)
    if not (names(layout.parameters) and names(layout.constants) and n_p <= MAX_ENTRY_STATES
            and n_k <= MAX_ENTRY_STATES and len(layout.condition_kinds) == layout.n + n_p
            and all(kind in _KINDS for kind in layout.condition_kinds)
            and type(layout.singular) is bool
            and (not layout.stretch or (len(layout.stretch) == layout.regions
                                        and all(whole(d, 1, 10) for d in layout.stretch)))
            and layout.independent == prepared.facts.get("arguments", {}).get("independent")):
        raise _Refused("its state layout does not fit together")
    own = prepared.facts.get("own", {})
    added = {name for t in prepared.transforms for name in t.constants(None)}  # the classes' own constants
    if (set(prepared.parameters) != set(layout.parameters)
            or set(layout.constants) - added != set(own) | set(prepared.constants)):
        raise _Refused("its constants or parameters are not those of its layout")
    arguments = prepared.facts.get("arguments", {})
    eigenvalue = arguments.get("eigenvalue")
    unknowns = arguments.get("unknowns")
    eigen = [t for t in prepared.transforms if t.kind == "eigenvalue"]  # the reduce stage may name its classes
    if (bool(eigen) != (eigenvalue is not None)
            or (eigen and not (whole(eigen[0].index, 0, n_p - 1) and layout.parameters[eigen[0].index] == eigenvalue
                               and eigen[0].mode == (arguments.get("mode") or 1)))
            or (unknowns is not None and list(unknowns) != [f for f, _ in functions])):
        raise _Refused("its state layout is not that of the spec")
    points = prepared.facts.get("points")
    if type(points) is not list or len(points) != layout.regions + 1 or not all(type(q) is str for q in points):
        raise _Refused("its ends and interfaces do not fit its layout")
    args = {"x": 1, "y": layout.n, "p": n_p, "k": n_k}

    def fits(program: Any, wanted: list, shape: list) -> bool:
        return (type(program) is dict and program.get("shape") == shape and program.get("mesh") == "x"
                and _arguments(program) == [(a, args[a] if a in args else count) for a, count in wanted])

    for name, order in functions:
        recipe = prepared.recipes.get(name)
        if recipe is None or recipe.name != name or recipe.order != order:
            raise _Refused(f"its guess recipe of {name} does not fit its layout")
        if recipe.kind == "expression" and fits(recipe.program, [("x", 1), ("p", 0), ("k", 0)], [order]):
            continue
        terms = recipe.conditions
        if (recipe.kind == "polynomial" and all(whole(q, 0, layout.regions) and whole(j, 0, order - 1)
                                                for row in terms for q, j in row)
                and (recipe.program is None if not terms else
                     fits(recipe.program, [("x", 1), ("p", 0), ("k", 0)], [sum(len(row) + 1 for row in terms)]))):
            continue
        raise _Refused(f"its guess recipe of {name} does not fit its layout")
    if set(prepared.recipes) != {f for f, _ in functions}:
        raise _Refused("its guess recipes are not those of its functions")
    if set(prepared.quantities) != set(prepared.facts.get("outputs", {}).values()):
        raise _Refused("its compiled outputs are not those of the spec")

    def quantity(q: Quantity) -> None:
        wanted = [("x", 1), ("y", layout.users + len(functions)), ("p", n_p), ("k", n_k),
                  ("t", len(q.points) + len(q.integrals))]
        if (type(q.program) is not dict or q.program.get("shape") != [1] or q.program.get("mesh") != "y"
                or _arguments(q.program) != wanted):
            raise _Refused("a compiled output does not fit its layout")
        for at, state, order, side in q.points:
            if not (whole(state, 0, len(states) - 1) and whole(order, 0, 1000) and side in (-1, 0, 1)
                    and (type(at) is float or fits(at, [("x", 1), ("p", 0), ("k", 0)], [1]))):
                raise _Refused("a compiled output does not fit its layout")
        for inner in q.integrals:
            quantity(inner)

    for q in prepared.quantities.values():
        quantity(q)


def _arguments(program: dict) -> list:
    """``[(argument, number of symbols), ...]`` of a program (the grammar checks the symbols)."""
    args = program.get("args")
    if type(args) is not list or not all(type(a) is list and len(a) == 2 and type(a[1]) is list for a in args):
        return []
    return [(a[0], len(a[1])) for a in args]


class _Refused(ValueError):
    """A cache entry that is not used (the reason in words)."""


def _canonical(data: Any) -> str:
    """Plain data as text for comparison: a whole number and the same float alike (TOML keeps
    ``2`` an integer, a preparation holds ``2.0``)."""
    def plain(item: Any) -> Any:
        if isinstance(item, dict):
            return {str(k): plain(v) for k, v in item.items()}
        if isinstance(item, list | tuple):
            return [plain(v) for v in item]
        if type(item) is int:
            return float(item)
        return item

    return json.dumps(plain(data), sort_keys=True, separators=(",", ":"), allow_nan=False)


def _programs(quantities) -> list[dict]:  # noqa: ANN001
    found = []
    for q in quantities:
        found.append(q.program)
        found += [p[0] for p in q.points if isinstance(p[0], dict)]
        found += _programs(q.integrals)
    return found


def remember(key: str, prepared: Prepared, text: str, overrides: Mapping[str, float]) -> None:
    """Keep ``prepared`` under ``key`` with the spec's text and ``--set`` values it was made
    for; never raises (a cache costs speed, not correctness)."""
    path = _file(key)
    if path is None:
        return
    try:
        write_json(path, {"key": key, "spec": text, "set": _given(overrides), "prepared": prepared.plain()})
    except (TypeError, ValueError):
        return  # not JSON-ready (SymPy objects in the arguments): costs speed only
