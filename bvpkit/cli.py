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

from .status import Status

_EPILOG = "exit codes: " + ", ".join(f"{s.exit_code} {s.word}" for s in Status)


def _methods() -> list[str]:
    from .methods import REGISTRY

    return ["auto", *REGISTRY]


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="bvpkit",
        description="Solve two-point boundary-value problems written as on paper.",
        epilog=_EPILOG,
    )
    from . import __version__

    parser.add_argument("--version", action="version", version=f"bvpkit {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)

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
    from . import load, solve
    from .errors import OptionError

    problem = load(args.spec)
    if args.set:
        problem = problem.with_constants(**_constants(args.set))
    save = problem.settings.get("save", {})
    csv_path = Path(args.csv) if args.csv else None
    json_path = None
    if csv_path is None and save.get("solution_csv"):
        csv_path = safe_output_path(save["solution_csv"], args.overwrite)
    if save.get("report_json"):
        json_path = safe_output_path(save["report_json"], args.overwrite)
    if args.max_nodes is not None and args.max_nodes < 10:
        raise OptionError("--max-nodes must be at least 10")
    solution = solve(
        problem,
        method=args.method,
        tol=args.tol,
        max_nodes=args.max_nodes,
        verify=False if args.no_verify else None,
    )
    if csv_path is not None:
        solution.to_csv(csv_path)
    report = solution.as_dict()
    if json_path is not None:
        json_path.write_text(json.dumps(report, indent=2) + "\n")
    if args.json:
        return solution.status.exit_code, report
    title = f"{problem.title}\n" if problem.title else ""
    print(title + solution.summary())
    if csv_path is not None:
        print(f"mesh solution written to {csv_path}")
    if json_path is not None:
        print(f"report written to {json_path}")
    return solution.status.exit_code, None


def _trace(args: argparse.Namespace) -> tuple[int, Any]:
    from . import load, trace
    from .errors import OptionError

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
    if branch.message.startswith("interrupted"):
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


def _check(args: argparse.Namespace) -> tuple[int, Any]:
    from . import load

    problem = load(args.spec)
    system = problem.system
    report = {
        "success": True,
        "status": "valid",
        "message": "the spec describes a well-posed problem",
        "unknowns": {name: problem.orders[name] for name in problem.unknowns},
        "states": list(system.state_names),
        "conditions": len(system.conditions),
        "parameters": list(system.parameters),
        "outputs": list(problem.outputs),
    }
    if args.json:
        return 0, report
    print(f"{args.spec}: valid")
    print(f"  state layout: {system.layout()}")
    print(f"  {len(system.conditions)} boundary conditions for total order "
          f"{sum(problem.orders.values())} + {len(system.parameters)} unknown parameter(s)")
    if problem.outputs:
        print(f"  outputs: {', '.join(problem.outputs)}")
    return 0, None


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit code."""
    parser = _parser()
    args = parser.parse_args(argv)
    wants_json = getattr(args, "json", False)
    try:
        from .errors import BvpkitError

        handler = {"solve": _solve, "check": _check, "trace": _trace}[args.command]
        code, report = handler(args)
    except KeyboardInterrupt:
        return _fail(Status.INTERRUPTED, "interrupted", wants_json)
    except BvpkitError as err:
        return _fail(Status.BAD_INPUT, err.one_line(), wants_json)
    except Exception as err:  # noqa: BLE001 - the last line of defence: one line, no traceback
        if os.environ.get("BVPKIT_DEBUG"):
            raise
        return _fail(Status.INTERNAL, f"{type(err).__name__}: {err}", wants_json)
    if report is not None:
        print(json.dumps(_json_ready(report), indent=2, allow_nan=False))
    return code


def _json_ready(value: Any) -> Any:
    """NaN and inf become null so the output is strict JSON."""
    import math

    if isinstance(value, dict):
        return {str(k): _json_ready(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_json_ready(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


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
