"""Whole-process start-up: `bvpkit solve SPEC` as an engineer runs it, cold and warm.

Cold: an empty cache folder, so the spec is parsed and validated (pydantic), reduced and
its code generated (SymPy). Warm: the same spec again; the prepared problem and generated
code come from the cache (no SymPy, no pydantic) and the problem is solved afresh. The floor
is a Python process that only imports what the warm path must (NumPy, SciPy's sparse and
banded LU): no run of bvpkit can start faster.

bvpkit's own modules are compiled to bytecode first, as ``pip install`` does: these machines
set ``PYTHONDONTWRITEBYTECODE=1``, so an editable install recompiled bvpkit's 17,000 lines
in every process (0.25-0.3 s of CPU on a warm run, what once looked like the cost of
importing ``methods.base``), while NumPy and SciPy, installed as wheels, arrive compiled.
The run without bytecode is shown beside it.
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).parents[1]
SPECS = ["cantilever_shelf.toml", "plate_boundary_layer.toml", "strut_buckling.toml"]
_FLOOR = "import numpy, scipy.sparse.linalg, scipy.linalg.lapack"


def _time(command: list[str], env: dict[str, str]) -> float:
    start = time.perf_counter()
    done = subprocess.run(command, env=env, cwd=ROOT, capture_output=True, text=True)
    seconds = time.perf_counter() - start
    if done.returncode not in (0,):
        raise RuntimeError(f"{' '.join(command)} failed: {done.stdout[-200:]} {done.stderr[-200:]}")
    return seconds


def _compile_bytecode() -> None:
    """bvpkit's modules to __pycache__, as an installation does (the environment may forbid
    Python to write them itself)."""
    import compileall

    compileall.compile_dir(str(ROOT / "bvpkit"), quiet=1)


def _without_bytecode(spec: str, repeats: int) -> float:
    """Median of warm runs that must compile bvpkit's sources (its bytecode moved aside)."""
    import shutil

    folders = [p for p in (ROOT / "bvpkit").rglob("__pycache__")]
    aside = Path(tempfile.mkdtemp())
    times = []
    try:
        for i, folder in enumerate(folders):
            shutil.move(str(folder), str(aside / str(i)))
        with tempfile.TemporaryDirectory() as kept:
            env = {**os.environ, "BVPKIT_CACHE_DIR": kept, "PYTHONDONTWRITEBYTECODE": "1"}
            command = [sys.executable, "-m", "bvpkit", "solve", f"specs/{spec}"]
            _time(command, env)
            times = [_time(command, env) for _ in range(repeats)]
    finally:
        for i, folder in enumerate(folders):
            if (aside / str(i)).exists():
                shutil.move(str(aside / str(i)), str(folder))
        shutil.rmtree(aside, ignore_errors=True)
    return statistics.median(times)


def startup(repeats: int = 5) -> str:
    _compile_bytecode()
    lines = [
        "### Whole-process `bvpkit solve`, cold and warm",
        "",
        f"Medians of {repeats} runs each, alternating; cold runs start from an empty cache folder. "
        f"Floor: `python -c \"{_FLOOR}\"`.",
        "",
        "| spec | cold (s) | warm (s) | floor (s) | cold / floor (target <= 2.5) | warm / floor (target <= 1.2) "
        "| warm: ranges (s) | warm without bytecode (s) |",
        "| --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    for spec in SPECS:
        cold, warm, floor = [], [], []
        command = [sys.executable, "-m", "bvpkit", "solve", f"specs/{spec}"]
        with tempfile.TemporaryDirectory() as kept:
            warm_env = {**os.environ, "BVPKIT_CACHE_DIR": kept}
            _time(command, warm_env)  # prepares the warm cache
            for _ in range(repeats):
                with tempfile.TemporaryDirectory() as empty:
                    cold.append(_time(command, {**os.environ, "BVPKIT_CACHE_DIR": empty}))
                warm.append(_time(command, warm_env))
                floor.append(_time([sys.executable, "-c", _FLOOR], dict(os.environ)))
        c, w, f = (statistics.median(v) for v in (cold, warm, floor))
        bare = _without_bytecode(spec, 3)
        lines.append(f"| {spec} | {c:.2f} | {w:.2f} | {f:.2f} | {c / f:.2f} | {w / f:.2f} | "
                     f"{min(warm):.2f}-{max(warm):.2f} (floor {min(floor):.2f}-{max(floor):.2f}) | {bare:.2f} |")
    lines += ["", "Heavy modules a warm `bvpkit solve` imports (none expected): " + (_heavy() or "none"), ""]
    return "\n".join(lines) + "\n"


def _heavy() -> str:
    """Which of SymPy, pydantic and SciPy's integrate/optimize a warm solve imports."""
    with tempfile.TemporaryDirectory() as kept:
        env = {**os.environ, "BVPKIT_CACHE_DIR": kept}
        command = [sys.executable, "-X", "importtime", "-m", "bvpkit", "solve", f"specs/{SPECS[0]}"]
        subprocess.run(command, env=env, cwd=ROOT, capture_output=True)
        done = subprocess.run(command, env=env, cwd=ROOT, capture_output=True, text=True)
    names = {line.rsplit("|", 1)[-1].strip() for line in done.stderr.splitlines() if "|" in line}
    heavy = sorted(n for n in names if n in ("sympy", "pydantic", "scipy.integrate", "scipy.optimize", "matplotlib"))
    return ", ".join(heavy)


SECTIONS = [startup]
