"""Problems prepared once, solved many times: a fast second ``bvpkit solve``, light workers.

The first ``bvpkit solve`` of a spec parses its text, reduces the equations and generates
code (SymPy's work, most of a second). It then keeps, in the cache folder beside the
generated code, the problem's preparation (:func:`plain_problem`): its plain facts
(``Problem.plain``, with its guess recipes), the generated code of its system and of the
spec's outputs, and the starting guesses it computed, under a key made of the spec file's
bytes, the ``--set`` values and the bvpkit code (``compiled.code_stamp``). The next run
with the same key rebuilds the problem from it (:func:`problem_from_plain`) and solves it
without importing SymPy; anything the preparation does not cover (a new expression) builds
the symbolic parts on demand. The solve itself is done afresh every time. Sweeps ship the
same preparation to their workers.

A cache file is written atomically (temporary file, then ``os.replace``; the oldest files
beyond ``compiled.CACHE_KEEP`` are dropped) and carries a SHA-256 checksum; it is read with
the checks of ``compiled.read_private``, and one that is unreadable, damaged, refused or from
other code is ignored and rewritten. Generated functions travel as programs (plain data,
``bvpkit.program``), never as code: they are printed and checked afresh when built.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from .compiled import _MEMORY, _cache_dir, assemble, build_quantity, code_stamp, note, read_json, write_json
from .errors import BvpkitError
from .problem import Problem
from .program import validate

_KIND = "problem"


def spec_key(path: str | Path, overrides: Mapping[str, float]) -> str | None:
    """Key of a spec file with ``--set`` values (None when the file cannot be read)."""
    try:
        data = Path(path).read_bytes()
    except OSError:
        return None
    digest = hashlib.sha256()
    digest.update(code_stamp().encode())
    digest.update(b"\0" + data + b"\0")
    digest.update(json.dumps(sorted(overrides.items())).encode())
    return digest.hexdigest()[:32]


def _file(key: str) -> Path | None:
    folder = _cache_dir()
    return None if folder is None else folder / f"{_KIND}-{key}-{code_stamp()}.json"


def plain_problem(problem: Problem, expressions: list[str]) -> dict[str, Any]:
    """JSON-ready preparation of ``problem``: its plain facts (with guess recipes), the
    guesses it has computed, and ``expressions`` compiled (SymPy's work, done here once)."""
    from .solution import compile_quantity

    compiled = problem.compiled()
    quantities = {}
    for text in expressions:
        function, points, running = compile_quantity(problem, compiled, text)
        plain = [[point if isinstance(point, float) else {"program": point.program}, str(name), int(order)]
                 for point, name, order in points]
        quantities[text] = {"program": function.program, "points": plain, "running": running}
    starts = {k: {"y": y.ravel().tolist(), "shape": list(y.shape), "p": p.tolist()}
              for k, (y, p) in problem.__dict__.get("_starts", {}).items()}
    system = {"programs": list(compiled.programs), "pattern": compiled.jac_pattern.tolist(), "sides": compiled.bc_sides.tolist()}
    return {"problem": problem.plain(), "system": system, "starts": starts, "quantities": quantities}


def problem_from_plain(body: dict[str, Any]) -> Problem:
    """The problem of :func:`plain_problem`'s data, rebuilt without SymPy."""
    from .solution import remember_quantity

    starts = {k: (np.array(v["y"], dtype=float).reshape(v["shape"]), np.array(v["p"], dtype=float))
              for k, v in body["starts"].items()}
    problem = Problem.from_plain(body["problem"], starts)
    for recipe in problem.__dict__.get("_recipes", {}).values():  # refused now, not in the middle of a solve
        if recipe.program is not None or recipe.kind == "expression":
            validate(recipe.program)
    layout = problem.__dict__["_layout"]
    if layout.key not in _MEMORY:  # the generated code travels along (no disk cache needed)
        system = body["system"]
        assemble(layout, system["programs"], np.array(system["pattern"], dtype=bool), np.array(system["sides"], dtype=int))
    for text, q in body["quantities"].items():
        points = [(float(point) if not isinstance(point, dict) else build_quantity(point["program"]), str(name),
                   int(order)) for point, name, order in q["points"]]
        remember_quantity(problem, text, build_quantity(q["program"]), points, bool(q["running"]))
    return problem


def cached_problem(key: str | None) -> Problem | None:
    """The problem kept under ``key``, rebuilt without SymPy, or None."""
    path = None if key is None else _file(key)
    if path is None:
        return None
    body = read_json(path)
    if body is None:
        return None  # missing, skipped or damaged: prepare afresh
    try:
        if body["key"] != key:
            raise KeyError("key")
        return problem_from_plain(body)
    except (ValueError, KeyError, TypeError, IndexError, RecursionError) as err:  # ProgramError is a ValueError
        why = err.one_line() if isinstance(err, BvpkitError) else "it does not hold a preparation"
        note(f"cache entry {path.name} skipped: {why}")
        return None


def remember(key: str | None, problem: Problem) -> None:
    """Keep the preparation of ``problem`` (after a solve) under ``key``; never raises."""
    path = None if key is None else _file(key)
    if path is None:
        return
    try:
        write_json(path, {"key": key, **plain_problem(problem, list(problem.outputs.values()))})
    except (TypeError, ValueError, AttributeError):
        return  # not JSON-ready (SymPy objects in the arguments): costs speed only
