"""Timing harness: alternate the contenders within one process, report medians and ratios."""

from __future__ import annotations

import datetime
import os
import platform
import statistics
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

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
