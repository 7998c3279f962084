"""The ``bvpkit`` command: thin argument parsing over the library.

Exit codes come from :class:`bvpkit.status.Status` (``docs/failures.md`` lists them).
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from ._output import json_ready
from .status import Status

_EPILOG = "exit codes: " + ", ".join(f"{s.exit_code} {s.word}" for s in Status)


def _methods() -> list[str]:
    from .methods import REGISTRY

    return ["auto", *REGISTRY]


class _Parser(argparse.ArgumentParser):
    """Usage errors are bad input: one line (or one JSON object with --json), exit code 2."""

    def error(self, message: str):  # noqa: ANN201
        if "--json" in getattr(self, "_argv", sys.argv[1:]):
            print(json.dumps({"success": False, "status": Status.BAD_INPUT.word, "message": message}))
            sys.exit(Status.BAD_INPUT.exit_code)
        super().error(message)


def _parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="bvpkit",
        description="Solve two-point boundary-value problems written as on paper.",
        epilog=_EPILOG,
    )
    from . import __version__

    parser.add_argument("--version", action="version", version=f"bvpkit {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", required=True, parser_class=_Parser)

    solve = commands.add_parser(
        "solve", help="solve the problem of a TOML spec", description="Solve the problem of a TOML spec and print a summary.", epilog=_EPILOG
    )
    solve.add_argument("spec", help="path of the TOML spec file")
    solve.add_argument("--method", choices=_methods(), help="solution method (default: the spec's, else auto)")
    solve.add_argument("--tol", type=float, help="tolerance on the relative error (default: the spec's, else 1e-6)")
    solve.add_argument("--max-nodes", type=int, help="mesh limit")
    solve.add_argument("--no-verify", action="store_true", help="skip the error estimate (faster)")
    solve.add_argument(
        "--set", action="append", default=[], metavar="NAME=VALUE", help="change a constant (repeatable)"
    )
    solve.add_argument("--csv", metavar="FILE", help="write the mesh solution as CSV")
    solve.add_argument("--json", action="store_true", help="print the result as JSON instead of a summary")
    solve.add_argument(
        "--overwrite", action="store_true", help="let files named in the spec's [save] replace existing files"
    )

    trace = commands.add_parser(
        "trace", help="trace solutions as a constant changes (continuation through folds)",
        description="Trace the solution family of a spec through one of its constants, around folds; "
        "settings come from the spec's [trace] section or from these options.", epilog=_EPILOG,
    )
    trace.add_argument("spec", help="path of the TOML spec file")
    trace.add_argument("--parameter", help="the constant to trace")
    trace.add_argument("--start", type=float, help="first value of the parameter")
    trace.add_argument("--stop", type=float, help="last value of the parameter")
    trace.add_argument("--output", action="append", metavar="EXPR",
                       help="an expression (or output name) to record; repeatable (default: the spec's)")
    trace.add_argument("--max-points", type=int, help="upper bound on the points (default 200)")
    trace.add_argument("--tol", type=float, help="tolerance of each point")
    trace.add_argument("--method", choices=_methods(), help="method of the natural steps")
    trace.add_argument("--set", action="append", default=[], metavar="NAME=VALUE", help="change a constant (repeatable)")
    trace.add_argument("--csv", metavar="FILE", help="write the branch as CSV")
    trace.add_argument("--json", action="store_true", help="print the branch as JSON instead of a table")
    trace.add_argument("--plot", metavar="FILE.png", help="draw the branch (needs the plot extra)")
    trace.add_argument("--quiet", action="store_true", help="no progress bar")

    sweep = commands.add_parser(
        "sweep", help="solve over a grid of constants (design charts), resumable",
        description="Solve the spec's problem at every point of the grid in its [sweep] section, on local "
        "processes or a Dask cluster; with --store, a rerun solves only what is missing.", epilog=_EPILOG,
    )
    sweep.add_argument("spec", help="path of the TOML spec file")
    sweep.add_argument("--store", metavar="FILE.sqlite", help="SQLite store of finished points (resumable)")
    sweep.add_argument("--workers", type=int, help="local worker processes (default: one per core)")
    sweep.add_argument("--serial", action="store_true", help="solve in this process, no workers")
    sweep.add_argument("--scheduler", metavar="ADDRESS", help="a Dask scheduler, e.g. tcp://127.0.0.1:8786 (dask extra)")
    sweep.add_argument("--retry-failed", action="store_true", help="solve again the points stored as failed")
    sweep.add_argument("--output", action="append", metavar="EXPR", help="an expression or output name; repeatable")
    sweep.add_argument("--tol", type=float, help="tolerance of each point")
    sweep.add_argument("--method", choices=_methods(), help="solution method")
    sweep.add_argument("--csv", metavar="FILE", help="write the table as CSV")
    sweep.add_argument("--json", action="store_true", help="print the table as JSON")
    sweep.add_argument("--plot", metavar="FILE.png", help="draw the design chart (plot extra)")
    sweep.add_argument("--quiet", action="store_true", help="no progress bar")

    check = commands.add_parser(
        "check", help="validate a spec without solving", description="Validate a spec and show its first-order form.", epilog=_EPILOG
    )
    check.add_argument("spec", help="path of the TOML spec file")
    check.add_argument("--json", action="store_true", help="print the result as JSON")
    return parser


def _constants(pairs: list[str]) -> dict[str, float]:
    from .errors import OptionError

    values = {}
    for pair in pairs:
        name, sep, value = pair.partition("=")
        try:
            if not sep:
                raise ValueError
            values[name.strip()] = float(value)
        except ValueError:
            raise OptionError(f"--set expects NAME=NUMBER, got {pair!r}") from None
    return values


def _writable(name: str | None) -> Path | None:
    """A path given on the command line: the user's choice, but its folder must exist."""
    from .errors import OptionError

    if name is None:
        return None
    path = Path(name)
    if path.is_dir():
        raise OptionError(f"cannot write {name}: it is a folder")
    folder = path.parent
    if not folder.is_dir():
        raise OptionError(f"cannot write {name}: the folder {folder} does not exist")
    if not os.access(folder, os.W_OK):
        raise OptionError(f"cannot write {name}: the folder {folder} is not writable")
    return path


def safe_output_path(name: str, overwrite: bool) -> Path:
    """Where a file named inside a spec may be written: under the working directory only."""
    from .errors import OptionError

    cwd = Path.cwd().resolve()
    path = Path(name)
    if path.is_absolute() or not name.strip():
        raise OptionError(f"output file '{name}' named in the spec must be a relative path")
    target = (cwd / path).resolve()
    if cwd != target and cwd not in target.parents:
        raise OptionError(f"output file '{name}' named in the spec points outside the working directory")
    if target.exists() and not overwrite:
        raise OptionError(f"output file '{name}' named in the spec exists; pass --overwrite to replace it")
    return target


def _solve(args: argparse.Namespace) -> tuple[int, Any]:
    from .driver import solve
    from .errors import OptionError
    from .prepared import cached, prepare, remember, spec_key

    overrides = _constants(args.set)
    key = spec_key(args.spec, overrides)
    prepared = cached(key)  # prepared by an earlier run: no parsing, no SymPy
    fresh = prepared is None
    if fresh:
        from . import load

        problem = load(args.spec)
        if overrides:
            problem = problem.with_constants(**overrides)
        prepared = prepare(problem)
    save = prepared.settings.get("save", {})
    csv_path = _writable(args.csv)
    json_path = None
    if csv_path is None and save.get("solution_csv"):
        csv_path = safe_output_path(save["solution_csv"], args.overwrite)
    if save.get("report_json"):
        json_path = safe_output_path(save["report_json"], args.overwrite)
    if args.max_nodes is not None and args.max_nodes < 10:
        raise OptionError("--max-nodes must be at least 10")
    solution = solve(
        prepared,
        method=args.method,
        tol=args.tol,
        max_nodes=args.max_nodes,
        verify=False if args.no_verify else None,
    )
    if fresh:
        remember(key, prepared)
    if csv_path is not None:
        solution.to_csv(csv_path)
    report = solution.as_dict()
    if json_path is not None:
        json_path.write_text(json.dumps(report, indent=2) + "\n")
    if args.json:
        return solution.status.exit_code, report
    title = f"{prepared.title}\n" if prepared.title else ""
    print(title + solution.summary())
    if csv_path is not None:
        print(f"mesh solution written to {csv_path}")
    if json_path is not None:
        print(f"report written to {json_path}")
    return solution.status.exit_code, None


def _trace(args: argparse.Namespace) -> tuple[int, Any]:
    from . import load, trace
    from .errors import OptionError

    _writable(args.csv), _writable(args.plot)
    problem = load(args.spec)
    if args.set:
        problem = problem.with_constants(**_constants(args.set))
    settings = dict(problem.settings.get("trace", {}))
    for key in ("parameter", "start", "stop", "max_points"):
        value = getattr(args, key)
        if value is not None:
            settings[key] = value
    if args.output:
        settings["outputs"] = args.output
    missing = [key for key in ("parameter", "start", "stop") if key not in settings]
    if missing:
        raise OptionError(
            f"trace needs {', '.join(missing)}: give --{missing[0]} or a [trace] section in the spec"
        )
    branch = trace(
        problem,
        settings["parameter"],
        start=float(settings["start"]),
        stop=float(settings["stop"]),
        outputs=settings.get("outputs"),
        tol=args.tol,
        method=args.method,
        step=settings.get("step"),
        max_points=settings.get("max_points", 200),
        progress=not args.quiet and not args.json,
    )
    if args.csv:
        branch.to_csv(args.csv)
    if args.plot:
        branch.plot(args.plot)
    code = 0 if branch.success else Status.NOT_CONVERGED.exit_code
    if branch.interrupted:
        code = Status.INTERRUPTED.exit_code
    if args.json:
        return code, branch.as_dict()
    title = f"{problem.title}\n" if problem.title else ""
    print(title + branch.summary())
    if args.csv:
        print(f"branch written to {args.csv}")
    if args.plot:
        print(f"plot written to {args.plot}")
    return code, None


def _sweep(args: argparse.Namespace) -> tuple[int, Any]:
    from . import load, sweep
    from .errors import MissingExtraError, OptionError

    _writable(args.csv), _writable(args.plot)
    problem = load(args.spec)
    settings = problem.settings.get("sweep")
    if not settings:
        raise OptionError(f"{args.spec} has no [sweep] section with a grid")
    client = None
    executor: Any = "serial" if args.serial else None
    if args.scheduler:
        try:
            from distributed import Client
        except ImportError:
            raise MissingExtraError('--scheduler needs the dask extra: pip install "bvpkit[dask]"') from None
        client = executor = Client(args.scheduler, timeout=30)
    try:
        result = sweep(problem, settings["grid"], outputs=args.output or settings.get("outputs"), store=args.store,
                       executor=executor, workers=args.workers, retry_failed=args.retry_failed, tol=args.tol,
                       method=args.method, progress=not args.quiet and not args.json)
    finally:
        if client is not None:
            client.close()
    if args.csv:
        result.to_csv(args.csv)
    if args.plot:
        result.plot(args.plot)
    code = 0 if result.success else Status.NOT_CONVERGED.exit_code
    if args.json:
        return code, result.as_dict()
    names = [*result.parameters, *result.outputs, "status"]
    print((f"{problem.title}\n" if problem.title else "") + result.message)
    print("  ".join(f"{n:>14s}" for n in names))
    for row in result.table:
        cells = [f"{row[n]:14.8g}" if isinstance(row[n], float) else f"{str(row[n]):>14s}" for n in names]
        print("  ".join(cells))
    for path, what in ((args.csv, "table"), (args.plot, "chart")):
        if path:
            print(f"{what} written to {path}")
    return code, None


def _check(args: argparse.Namespace) -> tuple[int, Any]:
    from . import load
    from .reduce import standard_form

    problem = load(args.spec)
    form = standard_form(problem)
    report = check_report(problem, form)
    for section in ("trace", "sweep"):
        settings = problem.settings.get(section) or {}
        names = [settings.get("parameter")] if section == "trace" else list((settings.get("grid") or {}))
        for name in names:
            if name is not None and name not in problem.constants:
                from .errors import OptionError, closest

                raise OptionError(f"[{section}] names '{name}', which is not a constant of the problem"
                                  f"{closest(name, problem.constants)}")
    if args.json:
        return 0, report
    print(f"{args.spec}: the spec reads as a complete problem (not solved; `bvpkit solve` tells whether it has a "
          "solution)")
    print(f"  first-order form ({report['independent']} mapped onto t in [0, 1] in each region):")
    for line in report["first_order"]:
        print(f"    {line}")
    print(f"  conditions: {report['count']}")
    if problem.outputs:
        print(f"  outputs: {', '.join(problem.outputs)}")
    return 0, None


def check_report(problem, form) -> dict[str, Any]:  # noqa: ANN001
    """What ``bvpkit check`` shows: the states, the first-order form and the count of conditions by part."""
    import sympy as sp

    names = {}
    layout = form.layout()
    for i, row in enumerate(layout.row_names):
        names[form.y[i]] = sp.Symbol(row.replace(" in region ", "@"))
    for i, q in enumerate(form.parameters):
        names[form.p[i]] = sp.Symbol(q)
    for i, c in enumerate(form.constants):
        names[form.k[i]] = sp.Symbol(c if c != "_length" else "L_inf")
    lines = []
    for i, (row, rhs) in enumerate(zip(layout.row_names, form.rhs)):
        text = sp.sstr(rhs.xreplace(names).xreplace({sp.Symbol("_x", real=True): sp.Symbol("t")}))
        if form.singular is not None and any(entry != 0 for entry in form.singular[i]):
            term = sp.sstr(sum(e * names[form.y[j]] for j, e in enumerate(form.singular[i]) if e != 0))
            text += f" + ({term})/t"
        lines.append(f"d({row})/dt = {text}")
    kinds = {kind: form.condition_kinds.count(kind) for kind in ("given", "continuity", "added", "phase")}
    parts = [f"{kinds['given']} given"]
    if kinds["continuity"]:
        parts.append(f"{kinds['continuity']} of continuity at interfaces, added by bvpkit")
    if kinds["added"]:
        parts.append(f"{kinds['added']} for added states (integrals, normalisation)")
    if kinds["phase"]:
        parts.append("1 phase condition")
    count = (f"{len(form.conditions)} = {' + '.join(parts)}, for {len(form.rhs)} states"
             f" + {len(form.parameters)} unknown parameter(s)")
    return {
        "success": True,
        "status": "valid",
        "message": "the spec reads as a complete problem (it was not solved)",
        "independent": problem.independent,
        "unknowns": {name: problem.orders[name] for name in problem.unknowns},
        "states": list(layout.row_names),
        "regions": layout.regions,
        "first_order": lines,
        "conditions": len(form.conditions),
        "condition_parts": kinds,
        "count": count,
        "parameters": list(form.parameters),
        "outputs": list(problem.outputs),
    }


def _show_cache_notes() -> None:
    """Print the library's notes on skipped cache folders and entries (the ``bvpkit.cache``
    logger) as one line each on standard error (the stream of the moment, looked up per note)."""
    import logging

    class CacheNotes(logging.Handler):
        def emit(self, record: logging.LogRecord) -> None:
            print(f"bvpkit: note: {record.getMessage()}", file=sys.stderr)

    logger = logging.getLogger("bvpkit.cache")
    if not any(type(h).__name__ == "CacheNotes" for h in logger.handlers):
        logger.addHandler(CacheNotes())


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit code."""
    _show_cache_notes()
    parser = _parser()
    _Parser._argv = list(argv) if argv is not None else sys.argv[1:]  # type: ignore[attr-defined]
    args = parser.parse_args(argv)
    wants_json = getattr(args, "json", False)
    try:
        from .errors import BvpkitError

        handler = {"solve": _solve, "check": _check, "trace": _trace, "sweep": _sweep}[args.command]
        code, report = handler(args)
    except KeyboardInterrupt:
        return _fail(Status.INTERRUPTED, "interrupted", wants_json)
    except BrokenPipeError:
        # the reader went away (e.g. `| head`): stop quietly, as command-line tools do
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    except BvpkitError as err:
        return _fail(Status.BAD_INPUT, err.one_line(), wants_json)
    except OSError as err:  # writing an output file failed after all (disk full, permissions)
        return _fail(Status.BAD_INPUT, f"cannot write {err.filename or 'an output file'}: {err.strerror}", wants_json)
    except Exception as err:  # noqa: BLE001 - the last line of defence: one line, no traceback
        if os.environ.get("BVPKIT_DEBUG"):
            raise
        return _fail(Status.INTERNAL, f"{type(err).__name__}: {err}", wants_json)
    if report is not None:
        try:
            print(json.dumps(json_ready(report), indent=2, allow_nan=False))
        except BrokenPipeError:
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, sys.stdout.fileno())
    return code


def _fail(status: Status, message: str, wants_json: bool) -> int:
    if wants_json:
        print(json.dumps({"success": False, "status": status.word, "message": message}))
    else:
        print(f"bvpkit: {status.word}: {message}", file=sys.stderr)
    return status.exit_code


def run() -> None:
    """Console-script entry point."""
    sys.exit(main())


if __name__ == "__main__":  # pragma: no cover
    run()
