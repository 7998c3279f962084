"""Run every benchmark, print the tables and prepend them to benchmarks/RESULTS.md."""

from __future__ import annotations

import sys

from . import collocation, continuation, scale, shooting, startup, sweeps
from .harness import record

SUITES = [*collocation.SECTIONS, *shooting.SECTIONS, *continuation.SECTIONS, *scale.SECTIONS, *sweeps.SECTIONS, *startup.SECTIONS]


def main(argv: list[str]) -> None:
    wanted = set(argv)
    sections = []
    for bench in SUITES:
        if wanted and bench.__name__ not in wanted:
            continue
        print(f"running {bench.__name__} ...", file=sys.stderr)
        sections.append(bench())
    print(record(sections))


main(sys.argv[1:])
