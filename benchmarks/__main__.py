"""Run the benchmarks and print their tables; write them to a file only when one is named.

``python -m benchmarks [SECTION ...] [--out FILE]``: every suite (or the sections named, the
function names in benchmarks/*.py), printed on standard output. With ``--out FILE`` the run
is also added at the top of FILE (made with a heading if it does not exist), newest first:
``--out benchmarks/RESULTS.md`` keeps the project's record. Nothing is written otherwise.

``python -m benchmarks testset ...`` runs the test set instead (see benchmarks/testset.py): it is
long, is not part of the default run, and writes a file only when given ``--out FILE``.
``python -m benchmarks reliability ...`` runs the reliability benchmark over the probes and the
whole test set (see benchmarks/reliability.py; the section ``reliability_probes`` of the
default run is its probes alone).
"""

from __future__ import annotations

import argparse
import datetime
import sys
from pathlib import Path

from . import collocation, complex, continuation, fitting, reliability, robust, scale, shooting, startup, sweeps
from .harness import machine, prepend

SUITES = [*collocation.SECTIONS, *robust.SECTIONS, *shooting.SECTIONS, *continuation.SECTIONS,
          *scale.SECTIONS, *sweeps.SECTIONS, *startup.SECTIONS, *complex.SECTIONS, *fitting.SECTIONS,
          *reliability.SECTIONS]


def report(sections: list[str]) -> str:
    """One run's text: a dated heading, the machine, then each section's table."""
    stamp = datetime.datetime.now().strftime("%Y-%m-%d %H:%M")
    return f"## Run of {stamp}\n\nMachine: {machine()}\n\n" + "\n".join(sections) + "\n"


def main(argv: list[str]) -> None:
    if argv[:1] == ["testset"]:
        from . import testset

        testset.main(argv[1:])
        return
    if argv[:1] == ["reliability"]:
        reliability.main(argv[1:])
        return
    names = [bench.__name__ for bench in SUITES]
    parser = argparse.ArgumentParser(prog="python -m benchmarks", description=__doc__.splitlines()[0])
    parser.add_argument("sections", nargs="*", metavar="SECTION", help=f"some of: {', '.join(names)}")
    parser.add_argument("--out", metavar="FILE",
                        help="also add the run at the top of FILE (e.g. benchmarks/RESULTS.md)")
    args = parser.parse_args(argv)
    unknown = sorted(set(args.sections) - set(names))
    if unknown:
        parser.error(f"unknown section {unknown[0]!r}; the sections are: {', '.join(names)}")
    out = Path(args.out) if args.out else None
    if out is not None and not out.parent.is_dir():
        parser.error(f"cannot write {out}: the folder {out.parent} does not exist")
    sections = []
    for bench in SUITES:
        if args.sections and bench.__name__ not in args.sections:
            continue
        print(f"running {bench.__name__} ...", file=sys.stderr)
        sections.append(bench())
    text = report(sections)
    print(text)
    if out is not None:
        prepend(out, text)
        print(f"added to {out}", file=sys.stderr)


if __name__ == "__main__":  # the test set's child processes import this module again
    main(sys.argv[1:])
