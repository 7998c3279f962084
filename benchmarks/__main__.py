"""Run every benchmark, print the tables and prepend them to benchmarks/RESULTS.md.

``python -m benchmarks testset ...`` runs the test set instead (see benchmarks/testset.py): it is
long, is not part of the default run, and writes a file only when given ``--out FILE``.
"""

from __future__ import annotations

import sys

from . import collocation, continuation, robust, scale, shooting, startup, sweeps
from .harness import record

SUITES = [*collocation.SECTIONS, *robust.SECTIONS, *shooting.SECTIONS, *continuation.SECTIONS,
          *scale.SECTIONS, *sweeps.SECTIONS, *startup.SECTIONS]


def main(argv: list[str]) -> None:
    if argv[:1] == ["testset"]:
        from . import testset

        testset.main(argv[1:])
        return
    wanted = set(argv)
    sections = []
    for bench in SUITES:
        if wanted and bench.__name__ not in wanted:
            continue
        print(f"running {bench.__name__} ...", file=sys.stderr)
        sections.append(bench())
    print(record(sections))


if __name__ == "__main__":  # the test set's child processes import this module again
    main(sys.argv[1:])
