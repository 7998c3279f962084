"""Preparations of spec files kept on disk: a second ``bvpkit solve`` of a spec reads its
prepared problem from the cache instead of parsing, reducing and compiling it again.

Keyed by the spec file's text, the ``--set`` values and the bvpkit code
(``compiled.code_stamp``). A cache file is written atomically and signed with the cache's
key (``compiled.signing_key``); it is read with the checks of ``compiled.read_private`` (a
private folder, a regular file of the user's, a size cap), and used only for the spec text
and values it was made for, after the checks of :func:`cached`. One that is unreadable,
damaged, unsigned, refused or from other code is ignored and rewritten. Generated functions
travel as programs (plain data, :mod:`bvpkit.programs.program`), never as code: they are
printed and checked afresh when built. This is the command line's cache (it knows spec
files), so it lives with the spec reader, above the library it keeps the results of.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from ..errors import BvpkitError
from ..methods.features import MAX_TERMS
from ..programs.compiled import (
    _cache_dir,
    code_stamp,
    note,
    quantity_function,
    read_json,
    write_json,
)
from ..programs.program import stored_size
from ..reduce.prepared import Prepared, written_numbers
from ..reduce.quantity import Quantity
from .specfile import spec_facts

# -- the disk cache of spec files' preparations --------------------------------------------------
_KIND = "problem"


def spec_key(text: str, overrides: Mapping[str, float]) -> str:
    """Key of a spec's text (as :func:`bvpkit.io.specfile.read_spec` read it) with ``--set`` values."""
    digest = hashlib.sha256()
    digest.update(code_stamp().encode())
    digest.update(b"\0" + text.encode("utf-8", "surrogatepass") + b"\0")
    digest.update(json.dumps(written_numbers(sorted(overrides.items()))).encode())
    return digest.hexdigest()[:32]


def _file(key: str) -> Path | None:
    folder = _cache_dir()
    return None if folder is None else folder / f"{_KIND}-{key}-{code_stamp()}.json"


def _given(overrides: Mapping[str, float]) -> list:
    return [[k, written_numbers(v) if isinstance(v, complex) else float(v)] for k, v in sorted(overrides.items())]


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
        features = _features(prepared.system.get("features"))
        stored_size([*(system if type(system) is list else []),
                     *(r.program for r in prepared.recipes.values()), *_programs(prepared.quantities.values()),
                     *features])
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
                        *_programs(prepared.quantities.values()), *features]:
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


def _features(found) -> list:  # noqa: ANN001
    """The program of a kept preparation's terms that can make narrow features (none: ``[]``),
    refused (``_Refused``) unless it is in the form :func:`bvpkit.reduce.prepared.feature_terms`
    makes: a program of two rows per term and one corner flag per term."""
    if found is None:
        return []
    corner = found.get("corner") if type(found) is dict else None
    program = found.get("program") if type(found) is dict else None
    if (type(corner) is not list or not 0 < len(corner) <= MAX_TERMS or any(type(c) is not bool for c in corner)
            or type(program) is not dict or program.get("shape") != [2 * len(corner)]):
        raise _Refused("its narrow features of the equations are not in their form")
    return [program]


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
            and layout.n <= MAX_ENTRY_STATES
            and names([*(f for f, _ in functions), *layout.algebraic])
            and len(layout.algebraic) <= MAX_ENTRY_STATES):
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
    if (set(prepared.solved_values(prepared.parameters)) != set(layout.parameters)
            or set(layout.constants) - added != set(prepared.solved_values({**own, **prepared.constants}))):
        raise _Refused("its constants or parameters are not those of its layout")
    arguments = prepared.facts.get("arguments", {})
    eigenvalue = arguments.get("eigenvalue")
    unknowns = arguments.get("unknowns")
    eigen = [t for t in prepared.transforms if t.kind == "eigenvalue"]  # the reduce stage may name its classes
    if (bool(eigen) != (eigenvalue is not None)
            or (eigen and not (whole(eigen[0].index, 0, n_p - 1) and layout.parameters[eigen[0].index] == eigenvalue
                               and eigen[0].mode == (arguments.get("mode") or 1)))
            or (unknowns is not None
                and (sorted(piece for u in unknowns if u not in layout.algebraic for piece in _spelled(prepared, u))
                     != sorted(f for f, _ in functions) or not set(layout.algebraic) <= set(unknowns)))):
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
        if (recipe.kind in ("polynomial", "levelled") and all(whole(q, 0, layout.regions) and whole(j, 0, order - 1)
                                                for row in terms for q, j in row)
                and (recipe.program is None if not terms else
                     fits(recipe.program, [("x", 1), ("p", 0), ("k", 0)], [sum(len(row) + 1 for row in terms)]))):
            continue
        raise _Refused(f"its guess recipe of {name} does not fit its layout")
    for name in layout.algebraic:  # where an algebraic unknown's inner solves start: a guess or none
        recipe = prepared.recipes.get(name)
        if (recipe is None or recipe.name != name or recipe.order != 1
                or not (recipe.kind == "expression" and fits(recipe.program, [("x", 1), ("p", 0), ("k", 0)], [1])
                        or recipe.kind == "polynomial" and recipe.program is None and not recipe.conditions)):
            raise _Refused(f"its guess recipe of {name} does not fit its layout")
    if set(prepared.recipes) != {f for f, _ in functions} | set(layout.algebraic):
        raise _Refused("its guess recipes are not those of its functions")
    if set(prepared.quantities) != set(prepared.facts.get("outputs", {}).values()):
        raise _Refused("its compiled outputs are not those of the spec")

    def parts(q: Quantity) -> int:  # 1 for a real value, 2 for a complex one; -1 for neither
        shape = q.program.get("shape") if type(q.program) is dict else None
        return shape[0] if shape in ([1], [2]) else -1

    def quantity(q: Quantity) -> None:
        wanted = [("x", 1), ("y", layout.users + len(functions) + len(layout.algebraic)), ("p", n_p), ("k", n_k),
                  ("t", len(q.points) + sum(parts(inner) for inner in q.integrals))]
        if (parts(q) < 1 or q.program.get("mesh") != "y" or _arguments(q.program) != wanted):
            raise _Refused("a compiled output does not fit its layout")
        for at, state, order, side in q.points:
            if not (whole(state, 0, len(states) + len(layout.algebraic) - 1) and whole(order, 0, 1000)
                    and side in (-1, 0, 1)
                    and (type(at) is float or fits(at, [("x", 1), ("p", 0), ("k", 0)], [1]))):
                raise _Refused("a compiled output does not fit its layout")
        for inner in q.integrals:
            quantity(inner)

    for q in prepared.quantities.values():
        quantity(q)


def _spelled(prepared: Prepared, name: str) -> list[str]:
    """The names of the functions the user's function ``name`` is solved as."""
    for t in prepared.transforms:
        found = t.spelled(name)
        if found is not None:
            return [piece for piece, _ in found]
    return [name]


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
        if isinstance(item, complex):
            return {"re": item.real, "im": item.imag}
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
