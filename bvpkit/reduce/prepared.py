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
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import OptionError, ProblemError, ProgramError, closest
from ..language.budget import budget, step_seconds
from ..language.options import SolveOptions
from ..language.problem import Problem, _not_a_constant, changed_numbers, check_positions
from ..methods.features import MAX_TERMS, locate
from ..programs.compiled import (
    _MEMORY,
    CompiledSystem,
    assemble,
)
from ..programs.layout import StateLayout
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
        Jacobian ``pattern``, condition ``sides``, and ``features``: the terms in the independent
        variable alone that can make narrow features, compiled (:func:`feature_terms`;
        None when there are none).
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
        given = self.solved_values({**self.constants, **self.facts["own"]})
        for t in self.transforms:
            given.update(t.constants(options))
        return np.array([given[name] for name in self.layout.constants], dtype=float)

    def p0(self) -> np.ndarray:
        """The start values of the unknown parameters in the order of the compiled ``p``."""
        given = self.solved_values(self.parameters)
        return np.array([given.get(q, 0.0) for q in self.layout.parameters], dtype=float)

    def solved_values(self, values: Mapping[str, Any]) -> dict[str, Any]:
        """Values by the user's names (constants, parameter guesses) as those of the standard
        form: a complex one as its real and imaginary parts."""
        out = dict(values)
        for t in self.transforms:
            out = t.inward(out)
        return out

    def user_values(self, values: Mapping[str, Any]) -> dict[str, Any]:
        """Values by the names of the standard form (solved parameters) as the user's names:
        a complex parameter from its real and imaginary parts."""
        out = dict(values)
        for t in self.transforms:
            out = t.outward(out)
        return out

    def features(self, p: np.ndarray, k: np.ndarray) -> tuple:
        """The narrow features and corners of the equations' terms in the independent variable
        alone at these values (:func:`bvpkit.methods.features.locate`; empty when there are none)."""
        return locate(self.system.get("features"), p, k)

    # -- new values --------------------------------------------------------------------------
    def with_constants(self, **values: float) -> Prepared:
        """The same problem with other values of some constants (no new code); checked like
        values in the file."""
        missing = [k for k in values if k not in self.constants]
        if missing:
            raise ProblemError(_not_a_constant(missing[0], self.constants, self.parameters))
        new = dataclasses.replace(self, constants={**self.constants,
                                                   **changed_numbers(values, self.constants, "constant")})
        new.check()
        return new

    def with_parameters(self, **values: float) -> Prepared:
        """The same problem with other guesses of its unknown parameters."""
        missing = [k for k in values if k not in self.parameters]
        if missing:
            raise OptionError(f"'{missing[0]}' is not an unknown parameter{closest(missing[0], self.parameters)}")
        return dataclasses.replace(self, parameters={**self.parameters,
                                                     **changed_numbers(values, self.parameters, "unknown parameter")})

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

    def real_outputs(self, labels: Mapping[str, str]) -> dict[str, str]:
        """Label -> expression, with each complex-valued expression as two real ones, its real
        and imaginary parts (labelled ``re(label)`` and ``im(label)``): what traces, fold curves
        and sweeps record (compiled now, so a bad expression is refused before any solve)."""
        out = {}
        for label, text in labels.items():
            if self.quantity(text).parts == 2:
                out[f"re({label})"], out[f"im({label})"] = f"re({text})", f"im({text})"
            else:
                out[label] = text
        for text in out.values():
            self.quantity(text)
        return out

    def recipes_for(self, name: str, expression: Any) -> dict[str, GuessRecipe]:
        """A guess expression for the user's function ``name`` given at solve time, as the
        recipes of the functions it is solved as (SymPy's work)."""
        from .form import standard_form
        from .guess import expression_recipes

        if name not in self.facts["unknowns"]:
            raise OptionError(f"guess for '{name}', which is not an unknown function"
                              f"{closest(name, self.facts['unknowns'])}")
        problem = self.problem()
        parsed = problem._guesses({name: expression})[name]
        return expression_recipes(problem, standard_form(problem), name, parsed)

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
        return {"facts": written_numbers(self.facts), "layout": self.layout.as_dict(), "system": self.system,
                "recipes": {k: r.plain() for k, r in self.recipes.items()},
                "quantities": {k: q.plain() for k, q in self.quantities.items()},
                "constants": written_numbers(self.constants), "parameters": written_numbers(self.parameters),
                "transforms": [t.plain() for t in self.transforms]}

    @classmethod
    def from_plain(cls, data: Mapping[str, Any]) -> Prepared:
        return cls(
            facts=read_numbers(dict(data["facts"])),
            layout=StateLayout.from_dict(data["layout"]),
            system=dict(data["system"]),
            recipes={k: GuessRecipe.from_plain(r) for k, r in data["recipes"].items()},
            quantities={k: Quantity.from_plain(q) for k, q in data["quantities"].items()},
            constants={k: _number(v) for k, v in data["constants"].items()},
            parameters={k: _number(v) for k, v in data["parameters"].items()},
            transforms=tuple(Transform.from_plain(t) for t in data["transforms"]),
        )

    def __repr__(self) -> str:
        return f"<Prepared {self.facts.get('title') or self.layout.row_names}>"


def written_numbers(value: Any) -> Any:
    """``value`` with every complex number written as ``{"re": ..., "im": ...}`` (JSON has none)."""
    if isinstance(value, complex):
        return {"re": value.real, "im": value.imag}
    if isinstance(value, dict):
        return {k: written_numbers(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [written_numbers(v) for v in value]
    return value


def read_numbers(value: Any) -> Any:
    """The reverse of :func:`written_numbers`: a mapping of exactly ``re`` and ``im`` numbers is
    a complex number (no name of a constant, function or output can be ``re`` or ``im``)."""
    if isinstance(value, dict):
        if set(value) == {"re", "im"} and all(isinstance(v, int | float) and not isinstance(v, bool)
                                              for v in value.values()):
            return complex(value["re"], value["im"])
        return {k: read_numbers(v) for k, v in value.items()}
    if isinstance(value, list):
        return [read_numbers(v) for v in value]
    return value


def _number(value: Any) -> float | complex:
    found = read_numbers(value)
    return found if isinstance(found, complex) else float(found)


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


def _own(problem) -> dict[str, float | complex]:  # noqa: ANN001
    return {f"{name}@{r + 1}": value for r, region in enumerate(problem.regions)
            for name, value in region.constants.items()}


def _parameters(problem) -> dict[str, float | complex]:  # noqa: ANN001
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
    system = {"programs": list(compiled.programs), "pattern": compiled.raw_pattern.tolist(),
              "sides": compiled.bc_sides.tolist(), "features": _feature_terms(form)}
    quantities = {text: compile_quantity(problem, form, text) for text in problem.outputs.values()}
    return Prepared(facts, compiled.layout, system, guess_recipes(problem, form), quantities,
                    dict(problem.constants), _parameters(problem), form.transforms)


def _feature_terms(form) -> dict | None:  # noqa: ANN001
    """The terms that can make narrow features (:func:`feature_terms`), or None: a
    hint for the first mesh, never a reason to refuse a problem."""
    try:
        with budget("looking for narrow features of the equations", seconds=min(2.0, step_seconds()),
                    advice="simplify the terms in the independent variable alone"):
            return feature_terms(form)
    except (ProgramError, ProblemError, TypeError, ValueError, RecursionError):
        return None


def feature_terms(form) -> dict | None:  # noqa: ANN001 - a reduce.StandardForm
    """The terms of ``form``'s right-hand side that can make a narrow feature and depend on the
    independent variable (and constants, parameters) alone, compiled: ``{"program": ...,
    "corner": [bool per term]}`` (the program gives the argument and the term, in rows
    ``2 j`` and ``2 j + 1``), or None when there are none. :mod:`bvpkit.methods.features` says
    which terms (``exp``, ``tanh``, ``erf``, ``erfc``, ``atan``, ``log`` and negative or
    fractional powers of their argument; ``abs``, ``sign``, steps, ``min`` and ``max``, a corner
    where their argument or the difference of their sides is zero) and what is done with them."""
    import sympy as sp

    from ..programs.codegen import compile_expressions
    from .form import X

    states = set(form.y)
    smooth = (sp.exp, sp.tanh, sp.erf, sp.erfc, sp.atan, sp.log)
    corners = (sp.Abs, sp.sign, sp.Heaviside)
    found: dict[Any, tuple[Any, bool]] = {}
    for entry in form.rhs:
        if not entry.has(X):
            continue
        for node in sp.preorder_traversal(entry):
            if len(found) >= MAX_TERMS:
                break
            if not node.has(X) or node in found or node.free_symbols & states:
                continue
            if isinstance(node, smooth):
                found[node] = (node.args[0], False)
            elif isinstance(node, corners):
                found[node] = (node.args[0], True)
            elif isinstance(node, sp.Min | sp.Max) and len(node.args) >= 2:
                found[node] = (node.args[0] - node.args[1], True)
            elif isinstance(node, sp.Pow) and node.exp.is_number and not (node.exp.is_integer and node.exp >= 0):
                found[node] = (node.base, False)
    if not found:
        return None
    exprs = []
    for node, (argument, _) in found.items():
        exprs += [argument, node]
    program = compile_expressions(exprs, [("x", [X]), ("p", form.p), ("k", form.k)], mesh="x").program
    return {"program": program, "corner": [corner for _, corner in found.values()]}
