"""Timing harness: alternate the contenders within one process, report medians and ratios."""

from __future__ import annotations

import datetime
import multiprocessing
import os
import platform
import statistics
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

RESULTS = Path(__file__).with_name("RESULTS.md")


@dataclass
class Contender:
    name: str
    run: Callable[[], float]  # returns the computed check value
    times: list[float] = field(default_factory=list)
    value: float = float("nan")
    failure: str = ""

    def __call__(self) -> float:
        try:
            return float(self.run())
        except Exception as err:  # noqa: BLE001 - a contender that fails is a result, not a crash
            self.failure = f"{type(err).__name__}: {str(err)[:80]}"
            return float("nan")


def race(contenders: list[Contender], repeats: int = 7, warmup: int = 1) -> None:
    """Run every contender ``repeats`` times, alternating, after ``warmup`` untimed runs each."""
    for c in contenders:
        for _ in range(warmup):
            c.value = c()
    for _ in range(repeats):
        for c in contenders:
            start = time.perf_counter()
            c.value = c()
            c.times.append(time.perf_counter() - start)


def machine() -> str:
    return (
        f"{platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}, "
        f"{platform.system()} {platform.release()}"
    )


def table(title: str, contenders: list[Contender], baseline: str, reference: float, note: str = "") -> str:
    base = statistics.median(next(c for c in contenders if c.name == baseline).times)
    lines = [f"### {title}", ""]
    if note:
        lines += [note, ""]
    lines += ["| contender | median time (ms) | ratio to " + baseline + " | relative error |", "| --- | --- | --- | --- |"]
    for c in contenders:
        t = statistics.median(c.times)
        err = abs(c.value - reference) / abs(reference) if reference else abs(c.value)
        shown = f"failed ({c.failure})" if c.failure and c.value != c.value else f"{err:.1e}"
        lines.append(f"| {c.name} | {1e3 * t:.2f} | {t / base:.2f} | {shown} |")
    return "\n".join(lines) + "\n"


def record(sections: list[str]) -> str:
    stamp = datetime.datetime.now().strftime("%Y-%m-%d %H:%M")
    text = f"## Run of {stamp}\n\nMachine: {machine()}\n\n" + "\n".join(sections) + "\n"
    previous = RESULTS.read_text() if RESULTS.exists() else "# Benchmark results (newest first)\n\n"
    head, _, rest = previous.partition("\n\n")
    RESULTS.write_text(head + "\n\n" + text + ("\n" + rest if rest else ""))
    return text


class Child:
    """One worker process running ``worker(conn)`` (a module-level function, so that a spawned
    process can import it), ended after a timeout and replaced on demand. ``prepared`` names the
    problems the living process has prepared (emptied with each new process)."""

    def __init__(self, worker: Callable) -> None:
        self._worker = worker
        self._ctx = multiprocessing.get_context("spawn")
        self._proc = self._conn = None
        self.prepared: set[str] = set()

    def ask(self, job: tuple, timeout: float) -> tuple[str, Any]:
        if self._proc is None or not self._proc.is_alive():
            parent, child = self._ctx.Pipe()
            self._proc = self._ctx.Process(target=self._worker, args=(child,), daemon=True)
            self._proc.start()
            child.close()
            self._conn, self.prepared = parent, set()
        self._conn.send(job)
        if self._conn.poll(timeout):
            try:
                return self._conn.recv()
            except EOFError:
                self.stop()
                return "crashed", "the child process died"
        self.stop()
        return "timeout", f"no answer within {timeout:g} s"

    def prepare(self, name: str, args: tuple = (), timeout: float | None = None) -> str:
        """Have the worker prepare problem ``name`` once (the job ``("prepare", name, *args)``):
        '' when it is ready, else why not (a line for the report)."""
        if name in self.prepared:
            return ""
        kind, reply = self.ask(("prepare", name, *args), timeout)
        if kind == "ok":
            self.prepared.add(name)
            return ""
        return f"preparation: {kind}: {str(reply).splitlines()[0]}"

    def stop(self) -> None:
        if self._proc is None:
            return
        if self._proc.is_alive():
            self._proc.terminate()
            self._proc.join(5)
            if self._proc.is_alive():
                self._proc.kill()
        self._proc.join()
        self._conn.close()
        self._proc = self._conn = None
        self.prepared = set()

    def close(self) -> None:
        if self._proc is not None and self._proc.is_alive():
            try:
                self._conn.send(None)
                self._proc.join(5)
            except (BrokenPipeError, OSError):
                pass
        self.stop()


RESULTS_HEADING = "# Benchmark results (newest first)"


def prepend(path: Path, text: str) -> None:
    """Add a run at the top of a results file (below its heading), newest first."""
    previous = path.read_text() if path.exists() else RESULTS_HEADING + "\n\n"
    head, _, rest = previous.partition("\n\n")
    path.write_text(head + "\n\n" + text + ("\n" + rest if rest else ""))
