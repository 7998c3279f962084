"""Problems prepared once, solved many times: the cache behind a fast second ``bvpkit solve``.

The first ``bvpkit solve`` of a spec parses its text, reduces the equations and generates
code (SymPy's work, most of a second). It then keeps, in the cache folder beside the
generated code, the plain facts of the problem (``Problem.plain``), the starting guesses it
computed and the generated code of the spec's outputs, under a key made of the spec file's
bytes, the ``--set`` values and the bvpkit code (``compiled.code_stamp``). The next run with the same key rebuilds
the problem from those facts (``Problem.from_plain``) and solves it without importing
SymPy; anything the facts do not cover (a new expression, a guess on another mesh) builds
the symbolic parts on demand. The solve itself is done afresh every time: only the
preparation is cached.

A cache file is written atomically (temporary file, then ``os.replace``; the oldest files
beyond ``compiled.CACHE_KEEP`` are dropped) and carries a SHA-256 checksum; one that is unreadable, tampered with or from another version is ignored
and rewritten. Generated code is re-checked by ``compiled.check_source`` before it runs.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from .compiled import _cache_dir, build_quantity, code_stamp, write_atomically
from .problem import Problem

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


def _checksum(body: Mapping[str, Any]) -> str:
    return hashlib.sha256(json.dumps(body, sort_keys=True).encode()).hexdigest()


def cached_problem(key: str | None) -> Problem | None:
    """The problem kept under ``key``, rebuilt without SymPy, or None."""
    path = None if key is None else _file(key)
    if path is None:
        return None
    try:
        data = json.loads(path.read_text())
        body = data["body"]
        if data["sha256"] != _checksum(body) or body["key"] != key:
            return None
        starts = {k: (np.array(v["y"], dtype=float).reshape(v["shape"]), np.array(v["p"], dtype=float))
                  for k, v in body["starts"].items()}
        problem = Problem.from_plain(body["problem"], starts)
        from .solution import remember_quantity

        for text, q in body["quantities"].items():
            points = [(float(point) if not isinstance(point, dict) else build_quantity(point["source"]), str(name),
                       int(order)) for point, name, order in q["points"]]
            remember_quantity(problem, text, build_quantity(q["source"]), points, bool(q["running"]))
        return problem
    except (OSError, ValueError, KeyError, TypeError, RuntimeError, SyntaxError):
        return None  # missing, corrupted or tampered with: prepare afresh


def remember(key: str | None, problem: Problem) -> None:
    """Keep the prepared facts of ``problem`` (after a solve) under ``key``; never raises."""
    path = None if key is None else _file(key)
    if path is None:
        return
    from .solution import known_quantity

    try:
        quantities = {}
        for text in problem.outputs.values():
            known = known_quantity(problem, text)
            if known is not None:
                function, points, running = known
                plain = [[point if isinstance(point, float) else {"source": point.source}, str(name), int(order)]
                         for point, name, order in points]
                quantities[text] = {"source": function.source, "points": plain, "running": running}
        starts = {k: {"y": y.ravel().tolist(), "shape": list(y.shape), "p": p.tolist()}
                  for k, (y, p) in problem.__dict__.get("_starts", {}).items()}
        body = {"key": key, "problem": problem.plain(), "starts": starts, "quantities": quantities}
        text = json.dumps({"body": body, "sha256": _checksum(body)})
    except (TypeError, ValueError, AttributeError):
        return  # not JSON-ready (SymPy objects in the arguments): costs speed only
    write_atomically(path, text)
