"""The ``bvpkit`` command: thin argument parsing over the library.

Exit codes come from :class:`bvpkit.status.Status` (``docs/failures.md`` lists them).

Ctrl-C at any moment (even while modules are still being imported) ends in exit code 130
and one line, or one JSON object under ``--json``: the package imports nothing heavy, and
:func:`run` catches the interrupt before anything else is imported. A reader that goes
away (``bvpkit solve spec | head``) silences the output but not the exit code.
"""

from __future__ import annotations

import argparse
import json
import os
import signal
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from .._interrupt import MESSAGE as INTERRUPTED
from .._interrupt import early_interrupt, wants_json
from .._output import json_ready
from ..errors import BvpkitError, MissingExtraError, OptionError, closest
from ..language import limits
from ..language.options import OPTIONS
from ..language.units import label, units_of
from ..status import Status

_EPILOG = "exit codes: " + ", ".join(f"{s.exit_code} {s.word}" for s in Status)


def _methods() -> list[str]:
    from ..methods import REGISTRY

    return ["auto", *REGISTRY]


class _Methods:
    """The ``--method`` choices, read from the registry only when asked (a value given, or
    the help shown): importing the methods brings in SciPy's sparse modules, which a spec
    refused on reading must not wait for."""

    def __contains__(self, name: object) -> bool:
        return name in _methods()

    def __iter__(self):  # noqa: ANN204
        return iter(_methods())

    def __len__(self) -> int:
        return len(_methods())


class _Parser(argparse.ArgumentParser):
    """Usage errors are bad input: one line (or one JSON object with --json), exit code 2."""
    def error(self, message: str):  # noqa: ANN201
        if "--json" in getattr(self, "_argv", sys.argv[1:]):
            print(json.dumps({"success": False, "status": Status.BAD_INPUT.word, "message": message}))
            sys.exit(Status.BAD_INPUT.exit_code)
        super().error(message)


def _option_flags(parser: argparse.ArgumentParser, names: Any, says: dict[str, str] | None = None) -> None:
    """The flags of solve options (language/options.py: one entry each, shared with the
    spec's ``[solver]`` table and Python's keywords); the library checks the values."""
    kinds = {"number": float, "count": int, "word": str}
    for name in names:
        option = OPTIONS[name]
        words = (says or {}).get(name, option.says)
        if option.kind == "switch":
            parser.add_argument(option.flag, dest=name, action="store_const", const=not option.default, help=words)
        elif name == "method":  # the names listed only when asked (the registry imports SciPy)
            parser.add_argument(option.flag, dest=name, choices=_Methods(), metavar="METHOD",
                                help=f"{words}: %(choices)s")
        else:
            parser.add_argument(option.flag, dest=name, type=kinds[option.kind], help=words,
                                metavar="SECONDS" if name == "time_limit" else None)


def _flag_values(args: argparse.Namespace, names: Any) -> dict[str, Any]:
    """The values of option flags, checked here so that an error names the flag typed."""
    values = {name: getattr(args, name, None) for name in names}
    for name, value in values.items():
        if value is not None:
            try:
                OPTIONS[name].check(value)
            except OptionError as err:
                raise OptionError(str(err).replace(name, OPTIONS[name].flag, 1)) from None
    return values


def _parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="bvpkit",
        description="Solve two-point boundary-value problems written as on paper.",
        epilog=_EPILOG,
    )
    from .. import __version__

    parser.add_argument("--version", action="version", version=f"bvpkit {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", required=True, parser_class=_Parser)

    solve = commands.add_parser(
        "solve", help="solve the problem of a TOML spec", description="Solve the problem of a TOML spec and print a summary.", epilog=_EPILOG
    )
    solve.add_argument("spec", help="path of the TOML spec file")
    _option_flags(solve, OPTIONS)
    solve.add_argument(
        "--set", action="append", default=[], metavar="NAME=VALUE", help="change a constant (repeatable)"
    )
    solve.add_argument("--csv", metavar="FILE", help="write the mesh solution as CSV")
    solve.add_argument("--plot", metavar="FILE.png", help="draw every unknown function, outputs marked (needs the "
                       "plot extra; the suffix names the format: png, pdf, svg, ...)")
    solve.add_argument("--json", action="store_true", help="print the result as JSON instead of a summary")
    solve.add_argument("--sensitivity", metavar="NAME[,NAME...]",
                       help="add a table of the exact derivatives of the outputs and unknown parameters in these "
                       "constants (with error estimates)")
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
    _option_flags(trace, ["tol", "method"], {"tol": "tolerance of each point", "method": "method of the natural steps"})
    trace.add_argument("--set", action="append", default=[], metavar="NAME=VALUE", help="change a constant (repeatable)")
    trace.add_argument("--csv", metavar="FILE", help="write the branch as CSV")
    trace.add_argument("--json", action="store_true", help="print the branch as JSON instead of a table")
    trace.add_argument("--plot", metavar="FILE.png", help="draw the branch (needs the plot extra; the suffix "
                       "names the format: png, pdf, svg, ...)")
    trace.add_argument("--quiet", action="store_true", help="no progress bar")
    trace.add_argument("--at", action="append", type=float, metavar="VALUE",
                       help="solve exactly at this value of the parameter, on every part of the branch; repeatable")
    trace.add_argument("--return-to", type=float, metavar="VALUE",
                       help="after a fold or branch point, end when the parameter comes back to this value")
    trace.add_argument("--no-branch-switching", "--no-switch", dest="no_switch", action="store_true",
                       help="stay on the branch at a branch point (--no-switch: its former name)")
    trace.add_argument("--stability", action="store_true",
                       help="judge each point as the steady state of u_t = u'' - g of a problem u'' = g "
                       "(reaction-diffusion, heat conduction, ignition); stable parts drawn solid, unstable dashed")

    folds = commands.add_parser(
        "fold-curve", help="follow a fold as a second constant changes (ignition and extinction maps)",
        description="Find a fold of the spec's problem in one constant and follow it as another constant changes; "
        "settings from the spec's [fold_curve] section or these options.", epilog=_EPILOG,
    )
    folds.add_argument("spec", help="path of the TOML spec file")
    folds.add_argument("--parameter", help="the constant the fold is in")
    folds.add_argument("--along", help="the constant the fold is followed along")
    folds.add_argument("--start", type=float, help="first value of the second constant")
    folds.add_argument("--stop", type=float, help="last value of the second constant")
    folds.add_argument("--output", action="append", metavar="EXPR", help="an expression or output name; repeatable")
    folds.add_argument("--at", action="append", type=float, metavar="VALUE",
                       help="locate the fold exactly at this value of the second constant; repeatable")
    _option_flags(folds, ["tol"], {"tol": "tolerance of each point"})
    folds.add_argument("--set", action="append", default=[], metavar="NAME=VALUE", help="change a constant (repeatable)")
    folds.add_argument("--csv", metavar="FILE", help="write the curve as CSV")
    folds.add_argument("--json", action="store_true", help="print the curve as JSON instead of a table")
    folds.add_argument("--plot", metavar="FILE.png", help="draw the curve (needs the plot extra)")

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
    sweep.add_argument(
        "--grid", action="append", metavar="NAME=FROM:TO:COUNT[:geometric] | NAME=V1,V2,...",
        help="an axis of the grid (repeatable; the first is the fast axis); replaces the spec's [sweep] grid",
    )
    _option_flags(sweep, ["tol", "method"], {"tol": "tolerance of each point"})
    sweep.add_argument("--csv", metavar="FILE", help="write the table as CSV")
    sweep.add_argument("--json", action="store_true", help="print the table as JSON")
    sweep.add_argument("--plot", metavar="FILE.png", help="draw the design chart (plot extra; the suffix names "
                       "the format)")
    sweep.add_argument("--quiet", action="store_true", help="no progress bar")

    fitting = commands.add_parser(
        "fit", help="fit constants to measurements (values, standard errors, correlation)",
        description="Fit constants of the spec's problem to measured values in a CSV file (a column named by the "
        "independent variable, one per expression of the solution, an optional 'sigma' column); settings from "
        "the spec's [fit] section or these options.", epilog=_EPILOG,
    )
    fitting.add_argument("spec", help="path of the TOML spec file")
    fitting.add_argument("--data", metavar="FILE.csv", help="the measurements (default: the [fit] section's data, "
                         "relative to the spec)")
    fitting.add_argument("--vary", action="append", metavar="NAME=START[,NAME=START]",
                         help="constants to fit and their start values (repeatable; replaces the [fit] section's)")
    fitting.add_argument("--sigma", type=float, help="standard deviation of every measurement (replaces a 'sigma' "
                         "column and the spec's; without any, the noise is estimated from the residuals)")
    _option_flags(fitting, ["tol", "method"], {"tol": "tolerance of each solve"})
    fitting.add_argument("--set", action="append", default=[], metavar="NAME=VALUE", help="change a constant (repeatable)")
    fitting.add_argument("--json", action="store_true", help="print the fit as JSON (values, errors, correlation)")
    fitting.add_argument("--plot", metavar="FILE.png", help="draw the data with error bars, the fitted profile and "
                         "the residuals (needs the plot extra)")

    check = commands.add_parser(
        "check", help="validate a spec without solving", description="Validate a spec and show its first-order form.", epilog=_EPILOG
    )
    check.add_argument("spec", help="path of the TOML spec file")
    check.add_argument("--json", action="store_true", help="print the result as JSON")
    return parser


def _constants(pairs: list[str], flag: str = "--set") -> dict[str, float | complex]:
    """``--set NAME=VALUE`` pairs (or another ``flag``'s); a value ending in ``j`` is complex, as
    Python writes it (``--set w=0.5+2j``), for a complex constant."""
    values: dict[str, float | complex] = {}
    for pair in pairs:
        name, sep, value = pair.partition("=")
        try:
            if not sep:
                raise ValueError
            text = value.strip()
            values[name.strip()] = complex(text.replace(" ", "")) if text[-1:] in ("j", "J") else float(text)
        except ValueError:
            raise OptionError(f"{flag} expects NAME=NUMBER (or a complex number such as 0.5+2j), got {pair!r}") from None
    return values


def _no_nul(name: str, what: str) -> None:

    if "\x00" in name:
        raise OptionError(f"{what} {name!r} holds a NUL character")


def _writable(name: str | None) -> Path | None:
    """A path given on the command line: the user's choice, but its folder must exist."""
    if name is None:
        return None
    _no_nul(name, "output file")
    path = Path(name)
    if path.is_dir():
        raise OptionError(f"cannot write {name}: it is a folder")
    folder = path.parent
    if not folder.is_dir():
        raise OptionError(f"cannot write {name}: the folder {folder} does not exist")
    if not os.access(folder, os.W_OK):
        raise OptionError(f"cannot write {name}: the folder {folder} is not writable")
    return path


def _picture(name: str | None) -> Path | None:
    """A ``--plot`` file: checked before any computation (matplotlib there, a format it writes)."""
    path = _writable(name)
    if path is None:
        return None
    try:
        import matplotlib  # noqa: F401 - only whether it is there
        from matplotlib.backend_bases import FigureCanvasBase
    except ImportError:
        formats, missing = list(PICTURE_FORMATS), True
    else:
        formats, missing = sorted(FigureCanvasBase.get_supported_filetypes()), False
    # the name is judged first: a wrong suffix is wrong whether or not the plot extra is there
    suffix = path.suffix[1:].lower()
    if suffix not in formats:
        said = f"'.{suffix}' is not a picture format" if suffix else "it has no suffix to name the format"
        raise OptionError(f"cannot draw {name}: {said}; use one of {', '.join(formats)}")
    if missing:
        raise MissingExtraError(f'--plot needs matplotlib: {PLOT_INSTALL}')
    return path


#: The formats every matplotlib since 3.7 writes with its default canvas: what a ``--plot`` name
#: is judged against when matplotlib is not installed (installed, its own list is used).
PICTURE_FORMATS = ("eps", "jpeg", "jpg", "pdf", "pgf", "png", "ps", "raw", "rgba", "svg", "svgz", "tif", "tiff")


#: The words that install the plotting extra, as the README gives them.
PLOT_INSTALL = 'pip install ".[plot]"'


class SpecOutput:
    """A file named in a spec's ``[save]``, confined to the working directory.

    Checked before the solve, written after it. In between, a folder on the way could be
    swapped for a symbolic link pointing elsewhere, so the writing does not go by the name
    again: it starts from the working directory opened (``os.open``) at check time and
    opens each folder relative to the previous one, refusing symbolic links
    (``O_NOFOLLOW``), and creates the file exclusively (``O_EXCL``) unless ``--overwrite``.
    Where the platform has no ``dir_fd`` (Windows), the real path is checked again at open.
    """

    def __init__(self, name: str, overwrite: bool, key: str):

        self.name, self.overwrite, self.key = name, overwrite, key
        _no_nul(name, f"output file named in the spec's [save] {key}")
        if not name.strip() or os.path.isabs(name) or Path(name).is_absolute():
            raise OptionError(f"output file '{name}' named in the spec must be a relative path")
        parts = Path(os.path.normpath(name)).parts
        if not parts or parts[0] == ".." or parts == (".",):
            raise OptionError(f"output file '{name}' named in the spec points outside the working directory")
        self.parts = parts
        self.cwd = Path.cwd().resolve()
        target = (self.cwd / name).resolve()
        if self.cwd != target and self.cwd not in target.parents:
            raise OptionError(f"output file '{name}' named in the spec points outside the working directory")
        if os.path.lexists(self.cwd.joinpath(*parts)) and not overwrite:
            raise OptionError(f"output file '{name}' named in the spec exists; pass --overwrite to replace it")
        self.root = os.open(".", os.O_RDONLY | getattr(os, "O_DIRECTORY", 0)) if _DIR_FD else None
        self.path = self.cwd.joinpath(*parts)

    def open(self):  # noqa: ANN201 - a text file object
        """The file, opened for writing without following any link on its way."""
        nofollow = getattr(os, "O_NOFOLLOW", 0)
        flags = os.O_WRONLY | os.O_CREAT | nofollow | (os.O_TRUNC if self.overwrite else os.O_EXCL)
        try:
            if self.root is None:  # no dir_fd: check the real path again, right before opening
                if self.path.parent.resolve() != self.cwd.joinpath(*self.parts[:-1]):
                    raise OptionError(f"output file '{self.name}' named in the spec: a folder on its way changed")
                fd = os.open(self.path, flags, 0o666)
            else:
                folder = os.dup(self.root)
                try:
                    for part in self.parts[:-1]:
                        inner = os.open(part, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0) | nofollow, dir_fd=folder)
                        os.close(folder)
                        folder = inner
                    fd = os.open(self.parts[-1], flags, 0o666, dir_fd=folder)
                finally:
                    os.close(folder)
        except FileExistsError:
            raise OptionError(f"output file '{self.name}' named in the spec exists; pass --overwrite to replace it") from None
        except OSError as err:
            raise OptionError(f"cannot write '{self.name}' named in the spec: {err.strerror} (a folder or the file "
                              "on its way may be a symbolic link, which is refused)") from None
        return os.fdopen(fd, "w", newline="")

    def close(self) -> None:
        if self.root is not None:
            os.close(self.root)
            self.root = None


_DIR_FD = os.open in os.supports_dir_fd and hasattr(os, "O_NOFOLLOW")


def safe_output_path(name: str, overwrite: bool) -> Path:
    """Where a file named inside a spec may be written: under the working directory only."""
    output = SpecOutput(name, overwrite, "file")
    output.close()
    return output.path


def _solve(args: argparse.Namespace) -> tuple[int, Any]:
    overrides = _constants(args.set)
    text = args.spec_text  # read once (see _main): the key, the check of a kept preparation, the problem
    from ..errors import BvpkitError, ProgramError
    from .kept import cached, remember, spec_key

    key = spec_key(text, overrides)
    problem = cached(key, text, overrides)  # prepared by an earlier run: no parsing, no SymPy
    fresh = problem is None
    if fresh:
        problem = _prepare_spec(args.spec, text, overrides)
    # the files to write come from the spec's text (a kept preparation is used only when its
    # settings agree with it, and then they are replaced by the text's own)
    save = problem.settings.get("save", {})
    csv_path = _writable(args.csv)
    picture = _picture(args.plot)
    csv_out = json_out = None
    if csv_path is None and save.get("solution_csv"):
        csv_out = SpecOutput(save["solution_csv"], args.overwrite, "solution_csv")
    if save.get("report_json"):
        json_out = SpecOutput(save["report_json"], args.overwrite, "report_json")
    options = _flag_values(args, OPTIONS)
    wrt = _names(args.sensitivity, "--sensitivity") if args.sensitivity is not None else None
    if wrt is not None:
        unknown = [n for n in wrt if n not in problem.constants]
        if unknown:
            raise OptionError(f"--sensitivity names '{unknown[0]}', which is not a constant of the problem"
                              f"{closest(unknown[0], problem.constants)}")
    from ..public import solve  # after the problem is read: a bad spec does not wait for SciPy

    try:
        solution = solve(problem, **options)
    except Exception as err:  # noqa: BLE001 - only a kept preparation is retried; a fresh one's error stands
        if fresh or (isinstance(err, BvpkitError) and not isinstance(err, ProgramError)):
            raise
        # a kept preparation that passed every check and still fails in use: prepared afresh
        from ..programs.compiled import note

        note(f"cache entry for {args.spec} skipped: it failed in use ({type(err).__name__}); prepared afresh")
        problem, fresh = _prepare_spec(args.spec, text, overrides), True
        solution = solve(problem, **options)
    if fresh:
        remember(key, problem, text, overrides)
    # the user asked for the file: a failed solve's is written too, every header saying it failed
    if csv_path is not None:
        solution.to_csv(csv_path, allow_failed=True)
    if picture is not None:  # a failed solve's too, marked on the figure as no answer
        solution.plot(picture, allow_failed=True)
    report = solution.as_dict()
    table = None
    if wrt is not None and solution.success:
        if not (problem.outputs or solution.parameters):
            raise OptionError(f"{args.spec}: --sensitivity differentiates the outputs and unknown parameters, and "
                              "the problem has none (add an [outputs] section)")
        table = solution.sensitivity(None, wrt)
        report["sensitivity"] = table.as_dict()
    for output, write in ((csv_out, lambda handle: solution.to_csv(handle, allow_failed=True)),
                          (json_out, lambda handle: handle.write(json.dumps(report, indent=2) + "\n"))):
        if output is not None:
            with output.open() as handle:
                write(handle)
            output.close()
    if args.json:
        return solution.status.exit_code, report
    title = f"{problem.title}\n" if problem.title else ""
    _say(title + solution.summary())
    if table is not None:
        _say("sensitivity (exact derivatives, +/- their estimated errors):\n" + table.summary())
    elif wrt is not None:
        _say("no sensitivity table: the solve failed")
    mesh = "mesh solution" if solution.success else "mesh solution of the failed solve (headers marked failed)"
    drawn = "plot" if solution.success else "plot of the failed solve (marked failed)"
    for path, what in ((csv_path or (csv_out and csv_out.path), mesh), (json_out and json_out.path, "report"),
                       (picture, drawn)):
        if path:
            _say(f"{what} written to {path}")
    return solution.status.exit_code, None


def _load(args: argparse.Namespace):  # noqa: ANN202 - a Problem
    """The problem of the spec file (its text read once, in _main), validated."""
    from .spec import loads

    return loads(args.spec_text, str(args.spec))


def _prepare_spec(path: str, text: str, overrides: dict[str, float]):  # noqa: ANN202 - a Prepared
    from ..reduce.prepared import prepare
    from .spec import loads

    loaded = loads(text, str(path))
    return prepare(loaded.with_constants(**overrides) if overrides else loaded)


def _family(args: argparse.Namespace, section: str, keys: tuple[str, ...]) -> tuple[Any, dict]:
    """The spec's problem (with ``--set``) and its ``[section]`` settings, the flags of ``keys``
    given on the command line taking their place; the output files checked first."""
    _writable(args.csv), _picture(args.plot)
    problem = _load(args)
    if args.set:
        problem = problem.with_constants(**_constants(args.set))
    settings = dict(problem.settings.get(section, {}))
    for key in keys:
        value = getattr(args, key)
        if value is not None:
            settings[key] = value
    return problem, settings


def _trace(args: argparse.Namespace) -> tuple[int, Any]:
    from .. import trace
    from ..errors import OptionError

    problem, settings = _family(args, "trace", ("parameter", "start", "stop", "max_points"))
    for key in ("start", "stop"):
        if key in settings:
            settings[key] = _number(settings[key], f"trace {key}")
    if args.output:
        settings["outputs"] = args.output
    missing = [key for key in ("parameter", "start", "stop") if key not in settings]
    if missing and not problem.constants:
        raise OptionError(f"{args.spec}: the problem has no constants, and a trace follows one as it changes "
                          "(give the number to vary a name under [problem] constants)")
    if missing:
        raise OptionError(
            f"{args.spec}: trace needs {', '.join(missing)}: give --{missing[0]} or a [trace] section in the spec "
            f"(constants: {', '.join(problem.constants)})"
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
        at=args.at if args.at else settings.get("at"),
        return_to=args.return_to if args.return_to is not None else settings.get("return_to"),
        branch_switching=not args.no_switch and settings.get("branch_switching", True),
        stability=bool(args.stability or settings.get("stability", False)),
    )
    units = units_of(problem)
    if args.csv:
        branch.to_csv(args.csv, units=units, independent=problem.independent)
    if args.plot:
        branch.plot(args.plot, title=problem.title, units=units)
    code = branch.status.exit_code
    report = branch.as_dict()
    if args.json:
        return code, report
    title = f"{problem.title}\n" if problem.title else ""
    _say(title + branch.summary() + _units_line(units, [settings["parameter"], *(settings.get("outputs") or problem.outputs)]))
    if args.csv:
        _say(f"branch written to {args.csv}")
    if args.plot:
        _say(f"plot written to {args.plot}")
    return code, None


def _fold_curve(args: argparse.Namespace) -> tuple[int, Any]:
    from .. import fold_curve
    from ..errors import OptionError

    problem, settings = _family(args, "fold_curve", ("parameter", "along", "start", "stop"))
    if args.output:
        settings["outputs"] = args.output
    missing = [key for key in ("parameter", "along", "start", "stop") if key not in settings]
    if missing:
        raise OptionError(
            f"fold-curve needs {', '.join(missing)}: give --{missing[0]} or a [fold_curve] section in the spec"
        )
    curve = fold_curve(
        problem, settings["parameter"], along=settings["along"], start=_number(settings["start"], "start"),
        stop=_number(settings["stop"], "stop"), outputs=settings.get("outputs"), tol=args.tol,
        at=args.at if args.at else settings.get("at"),
        search=tuple(settings["search"]) if settings.get("search") else None,
        max_points=settings.get("max_points", 200),
    )
    if args.csv:
        curve.to_csv(args.csv, units=units_of(problem), independent=problem.independent)
    if args.plot:
        curve.plot(args.plot)
    code = curve.status.exit_code
    if args.json:
        return code, curve.as_dict()
    title = f"{problem.title}\n" if problem.title else ""
    _say(title + curve.summary())
    for path, what in ((args.csv, "curve"), (args.plot, "chart")):
        if path:
            _say(f"{what} written to {path}")
    return code, None


def _sweep(args: argparse.Namespace) -> tuple[int, Any]:
    from .. import sweep
    from ..errors import MissingExtraError, OptionError

    _writable(args.csv), _picture(args.plot)
    if args.store is not None:
        _no_nul(args.store, "store")
    grid = _grid(args.grid) if args.grid else None
    problem = _load(args)
    settings = dict(problem.settings.get("sweep") or {})
    if grid is not None:
        settings["grid"] = grid
    if not settings.get("grid"):
        if not problem.constants:
            raise OptionError(f"{args.spec}: the problem has no constants, and a sweep varies them over a grid "
                              "(give the numbers to vary names under [problem] constants)")
        raise OptionError(f"{args.spec} has no [sweep] section with a grid; give one with --grid NAME=FROM:TO:COUNT "
                          f"(constants: {', '.join(problem.constants)})")
    client = None
    executor: Any = "serial" if args.serial else None
    if args.scheduler:
        try:
            from distributed import Client
        except ImportError:
            raise MissingExtraError('--scheduler needs the dask extra: pip install ".[dask]"') from None
        client = executor = Client(args.scheduler, timeout=30)
    try:
        result = sweep(problem, settings["grid"], outputs=args.output or settings.get("outputs"), store=args.store,
                       executor=executor, workers=args.workers, retry_failed=args.retry_failed, tol=args.tol,
                       method=args.method, progress=not args.quiet and not args.json)
    finally:
        if client is not None:
            client.close()
    units = units_of(problem)
    if args.csv and result.table:
        result.to_csv(args.csv, units=units, independent=problem.independent)
    if args.plot and result.table:
        result.plot(args.plot, title=problem.title, units=units)
    code = 0 if result.success else Status.NOT_CONVERGED.exit_code
    if result.interrupted:
        code = Status.INTERRUPTED.exit_code
    if args.json:
        return code, result.as_dict()
    names = [*result.parameters, *result.outputs, "status"]
    header = [label(n, units, problem.independent) for n in names]
    lines = [(f"{problem.title}\n" if problem.title else "") + result.message, "  ".join(f"{n:>14s}" for n in header)]
    for row in result.table:
        cells = [f"{row[n]:14.8g}" if isinstance(row[n], float) else f"{str(row[n]):>14s}" for n in names]
        lines.append("  ".join(cells))
    for path, what in ((args.csv, "table"), (args.plot, "chart")):
        if path:
            lines.append(f"{what} written to {path}")
    _say("\n".join(lines))
    return code, None


def _names(text: str, flag: str) -> list[str]:
    names = [n.strip() for n in text.split(",")]
    if not all(names):
        raise OptionError(f"{flag} expects NAME[,NAME...], got {text!r}")
    return names


def _fit(args: argparse.Namespace) -> tuple[int, Any]:
    from ..families.fitting import fit
    from .measured import read_measurements

    picture = _picture(args.plot)
    problem = _load(args)
    if args.set:
        problem = problem.with_constants(**_constants(args.set))
    settings = dict(problem.settings.get("fit") or {})
    if args.vary:
        vary: dict[str, Any] = {}
        for item in args.vary:
            vary.update(_constants([p for p in item.split(",") if p.strip()], "--vary") if "=" in item else
                        {n: None for n in _names(item, "--vary")})
        settings["vary"] = vary
    if not settings.get("vary"):
        raise OptionError(f"{args.spec}: fit needs the constants to vary: give --vary NAME=START or a [fit] section "
                          f"with vary = {{ NAME = START }} (constants: {', '.join(problem.constants) or 'none'})")
    for name in settings["vary"]:
        if name not in problem.constants:
            raise OptionError(f"fit: vary names '{name}', which is not a constant of the problem"
                              f"{closest(name, problem.constants)}")
    if args.data is not None:
        _no_nul(args.data, "data file")
        data_path = Path(args.data)
    elif settings.get("data"):
        data_path = Path(args.spec).parent / settings["data"]
    else:
        raise OptionError(f"{args.spec}: fit needs measurements: give --data FILE.csv or data = \"FILE.csv\" under [fit]")
    # the flag replaces every other sigma; a sigma column of the file (one per reading) comes
    # before the spec's single figure, which serves files without one
    data = read_measurements(data_path, problem.independent, args.sigma)
    per_reading = any(len(item) == 3 for item in data.values())
    sigma = args.sigma if args.sigma is not None or per_reading else settings.get("sigma")
    options = _flag_values(args, ["tol", "method"])
    result = fit(problem, data, vary=settings["vary"], sigma=sigma, bounds=settings.get("bounds"), **options)
    if picture is not None and result.values:
        from ..solver.plots import fit_figure

        fit_figure(result, picture, title=problem.title, units=units_of(problem))
    code = result.status.exit_code
    if args.json:
        return code, result.as_dict()
    title = f"{problem.title}\n" if problem.title else ""
    _say(title + result.summary() + _units_line(units_of(problem), list(result.names)))
    if picture is not None and result.values:
        _say(f"plot written to {picture}")
    return code, None


def _units_line(units: dict[str, str], names: Sequence[str]) -> str:
    shown = [f"{n} in {units[n]}" for n in dict.fromkeys(names) if n in units]
    return "\nunits: " + ", ".join(shown) if shown else ""


def _check(args: argparse.Namespace) -> tuple[int, Any]:
    from ..reduce.form import standard_form

    problem = _load(args)
    form = standard_form(problem)
    report = check_report(problem, form)
    _check_solver(problem, form)
    for section in ("trace", "sweep", "fit"):
        settings = problem.settings.get(section) or {}
        names = ([settings.get("parameter")] if section == "trace" else
                 list(settings.get("grid") or {}) if section == "sweep" else list(settings.get("vary") or {}))
        for name in names:
            if name is not None and name not in problem.constants:

                raise OptionError(f"{args.spec}: [{section}] names '{name}', which is not a constant of the problem"
                                  f"{closest(name, problem.constants)}")
    if args.json:
        return 0, report
    lines = [f"{args.spec}: the spec reads as a complete problem (not solved; `bvpkit solve` tells whether it "
             "has a solution)",
             f"  first-order form ({report['independent']} mapped onto t in [0, 1] in each region):",
             *(f"    {line}" for line in report["first_order"]),
             *([f"  differential states: {', '.join(report['states'])}; algebraic: "
                f"{', '.join(report['algebraic'])} (each solved from its algebraic equation at every point; index 1)"]
               if report["algebraic"] else []),
             f"  conditions: {report['count']}"]
    if problem.outputs:
        lines.append(f"  outputs: {', '.join(problem.outputs)}")
    _say("\n".join(lines))
    return 0, None


def _check_solver(problem, form) -> None:  # noqa: ANN001
    """The spec's [solver] settings, refused by ``check`` where ``solve`` would refuse them: an
    unknown method, a method that cannot take what the problem holds (a singular term), a
    constant named for continuation that the problem lacks."""
    from .. import methods
    from ..errors import OptionError, closest
    from ..programs.compiled import NEEDS
    from ..solver.driver import options

    chosen = options(problem.settings, {})
    needs = frozenset().union(*(t.needs for t in form.transforms))
    if chosen.method != "auto":
        missing = sorted(needs - methods.get(chosen.method).takes)
        if missing:
            able = ", ".join(m.name for m in methods.REGISTRY.values() if needs <= m.takes)
            raise OptionError(f"method {chosen.method!r} cannot take {', '.join(NEEDS.get(n, n) for n in missing)} "
                              f"of this problem; use {able} or auto")
    homotopy = chosen.homotopy
    if homotopy not in ("auto", "off") and homotopy not in problem.constants:
        raise OptionError(f"homotopy names '{homotopy}', which is not a constant of the problem"
                          f"{closest(homotopy, problem.constants)}; give \"auto\", \"off\" or one of its constants")


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
    held = len(form.algebraic)
    algebraic_rows = [name if layout.regions == 1 else f"{name}@{r + 1}"
                      for r in range(layout.regions) for name in form.algebraic]
    for i, row in enumerate(algebraic_rows):
        names[form.z[i]] = sp.Symbol(row)
    lines = []
    for i, (row, rhs) in enumerate(zip(layout.row_names, form.rhs)):
        text = sp.sstr(rhs.xreplace(names).xreplace({sp.Symbol("_x", real=True): sp.Symbol("t")}))
        if form.singular is not None and any(entry != 0 for entry in form.singular[i]):
            term = sp.sstr(sum(e * names[form.y[j]] for j, e in enumerate(form.singular[i]) if e != 0))
            text += f" + ({term})/t"
        lines.append(f"d({row})/dt = {text}")
    for i, (row, g) in enumerate(zip(algebraic_rows, form.constraints)):
        text = sp.sstr(g.xreplace(names).xreplace({sp.Symbol("_x", real=True): sp.Symbol("t")}))
        lines.append(f"0 = {text}   (determines {row})")
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
    if held:
        count += " (algebraic unknowns take none)"
    return {
        "success": True,
        "status": "valid",
        "message": "the spec reads as a complete problem (it was not solved)",
        "independent": problem.independent,
        "unknowns": {name: problem.orders[name] for name in problem.unknowns},
        "states": list(layout.row_names),
        "algebraic": {row: sp.sstr(g.xreplace(names).xreplace({sp.Symbol("_x", real=True): sp.Symbol("t")}))
                      for row, g in zip(algebraic_rows, form.constraints)},
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
            _say(f"bvpkit: note: {record.getMessage()}", sys.stderr)

    logger = logging.getLogger("bvpkit.cache")
    if not any(type(h).__name__ == "CacheNotes" for h in logger.handlers):
        logger.addHandler(CacheNotes())


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit code (130 after Ctrl-C, at any moment)."""
    arguments = list(argv) if argv is not None else sys.argv[1:]
    wants_json = _wants_json(arguments)
    try:
        return _main(arguments)
    except KeyboardInterrupt:
        return _interrupted(wants_json)
    except _OutputFailed as err:  # the standard output cannot take the outcome: said on stderr
        return _fail(Status.BAD_INPUT, f"cannot write the standard output: {err}", False)


def _wants_json(arguments: Sequence[str]) -> bool:
    # before argparse has run: --json, or an abbreviation of it that argparse would accept
    return wants_json(list(arguments))


def _main(arguments: list[str]) -> int:
    _Parser._argv = arguments  # type: ignore[attr-defined]
    _show_cache_notes()
    parser = _parser()
    args = parser.parse_args(arguments)
    wants_json = getattr(args, "json", False)
    try:

        handler = {"solve": _solve, "check": _check, "trace": _trace, "sweep": _sweep,
                   "fold-curve": _fold_curve, "fit": _fit}[args.command]
        if getattr(args, "spec", None) is not None:
            from .specfile import read_spec

            # once, first, before anything heavy is imported: a FIFO, a device or a file past
            # the size limit is refused in a fraction of a second, and never read whole
            args.spec_text = read_spec(args.spec)
        code, report = handler(args)
    except KeyboardInterrupt:
        return _interrupted(wants_json)
    except _OutputFailed:
        raise
    except BvpkitError as err:
        return _fail(Status.BAD_INPUT, err.one_line(), wants_json)
    except OSError as err:  # writing an output file failed after all (disk full, permissions)
        return _fail(Status.BAD_INPUT, f"cannot write {err.filename or 'an output file'}: {err.strerror}", wants_json)
    except Exception as err:  # noqa: BLE001 - the last line of defence: one line, no traceback
        if os.environ.get("BVPKIT_DEBUG"):
            raise
        return _fail(Status.INTERNAL, f"{type(err).__name__}: {err}", wants_json)
    if report is not None:
        _say(json.dumps(json_ready(report), indent=2, allow_nan=False))
    return code


def _interrupted(wants_json: bool) -> int:
    """Ctrl-C outside a step that keeps its own partial result: one line, or one JSON object."""
    if _CONSOLE:
        _ignore_interrupts()  # a second Ctrl-C while this is written must not cut it short
    return _fail(Status.INTERRUPTED, INTERRUPTED, wants_json)


#: Set by :func:`run`: this process is the ``bvpkit`` command (not a caller of :func:`main`),
#: so its handling of signals may change for good once the outcome is being written.
_CONSOLE = False


def _ignore_interrupts() -> None:
    try:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
    except ValueError:  # not the main thread (main() called from a thread): nothing to do
        pass


class _OutputFailed(Exception):  # noqa: N818 - not an error of the input: the standard output is full or gone
    """The standard output refused a write (a full disk, ``> /dev/full``)."""


def _say(text: str, stream: Any = None) -> None:
    """Print a line; a reader that went away (``| head``, ``| true``) silences the rest, nothing more.

    The exit code is the outcome's, whatever happened to the output. Any other failure to
    write the standard output (a full disk) raises :class:`_OutputFailed`, which :func:`main`
    says in one line on standard error (exit code 2); standard error's own failures are
    ignored.
    """
    stream = stream or sys.stdout
    try:
        print(text, file=stream, flush=True)
    except BrokenPipeError:
        _silence(stream)
    except OSError as err:
        _silence(stream)
        if stream is sys.stdout:
            raise _OutputFailed(err.strerror or type(err).__name__) from None


def _silence(stream: Any) -> None:
    """Point ``stream`` at the null device: Python's final flush at exit must not fail again."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, stream.fileno())
        os.close(devnull)
    except (OSError, ValueError):
        pass


def _fail(status: Status, message: str, wants_json: bool) -> int:
    if wants_json:
        try:
            _say(json.dumps({"success": False, "status": status.word, "message": message}))
            return status.exit_code
        except _OutputFailed:  # the line goes to standard error instead
            pass
    if message.lower().startswith((status.word, status.word.replace("_", " "))):
        _say(f"bvpkit: {message}", sys.stderr)  # the message says the status itself: once is enough
    else:
        _say(f"bvpkit: {status.word}: {message}", sys.stderr)
    return status.exit_code


def _number(value: Any, what: str) -> float:

    try:
        return limits.check_value(value, what)
    except ValueError as err:
        raise OptionError(str(err)) from None


def _grid(items: list[str]) -> dict[str, list[float]]:
    """``--grid`` axes: ``NAME=FROM:TO:COUNT[:geometric|linear]`` or ``NAME=V1,V2,...``, in order."""
    from ..families.sweep import axis_values

    grid: dict[str, list[float]] = {}
    for item in items:
        name, sep, text = item.partition("=")
        name = name.strip()
        if not sep or not name or not text.strip():
            raise OptionError(f"--grid expects NAME=FROM:TO:COUNT[:geometric] or NAME=V1,V2,..., got {item!r}")
        if name in grid:
            raise OptionError(f"--grid gives '{name}' twice")
        try:
            if ":" in text:
                parts = [p.strip() for p in text.split(":")]
                if len(parts) not in (3, 4):
                    raise ValueError
                spacing = parts[3] if len(parts) == 4 else "linear"
                grid[name] = axis_values(name, float(parts[0]), float(parts[1]), int(parts[2]), spacing)
            else:
                grid[name] = [float(v) for v in text.split(",")]
        except ValueError as err:
            if isinstance(err, OptionError):
                raise OptionError(f"--grid {item}: {err}") from None
            raise OptionError(f"--grid expects NAME=FROM:TO:COUNT[:geometric] or NAME=V1,V2,... with numbers, "
                              f"got {item!r}") from None
        for value in grid[name]:
            _number(value, f"--grid {name} value")
    return grid


def run() -> None:
    """Console-script entry point: Ctrl-C at any moment gives exit code 130 and one line (or JSON)."""
    global _CONSOLE
    _CONSOLE = True
    try:
        if signal.getsignal(signal.SIGINT) is early_interrupt:  # from here on main() handles Ctrl-C
            signal.signal(signal.SIGINT, signal.default_int_handler)
        code = main()
    except KeyboardInterrupt:  # between main's own handlers (while it returns)
        code = _interrupted(_wants_json(sys.argv[1:]))
    _ignore_interrupts()  # the interpreter's shutdown (atexit, flushing) is not to be cut short
    sys.exit(code)


if __name__ == "__main__":  # pragma: no cover
    run()
