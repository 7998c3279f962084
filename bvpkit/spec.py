"""TOML spec files -> validated models -> :class:`~bvpkit.Problem`.

A spec (all keys but ``[problem]``'s ``domain``, ``equations`` and ``conditions`` optional)::

    title = "Laminar layer on our test plate"

    [problem]
    independent = "eta"
    domain = [0, "inf"]
    equations = ["f''' + f*f''/2 = 0"]
    conditions = ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"]
    constants = { Re_x = 2.0e5 }
    guess = { f = "eta - 1 + exp(-eta)" }
    # unknowns = ["f"]; unknown_parameters = { lam = 1.0 }; eigenvalue = "P"; mode = 1

    [[problem.regions]]   # optional: the domain cut into regions, left to right
    end = "a"             # where this region stops (omit for the last)
    equations = ["..."]   # replace the problem's equations here (optional)
    constants = { k = 2.0 }  # constants with a value of their own here (optional)

    [solver]          # method, tol, max_nodes, verify, truncation, homotopy, time_limit
    tol = 1e-8

    [outputs]         # name = expression of the solution
    wall_shear = "f''(0)"

    [trace]           # for `bvpkit trace`: parameter, start, stop, outputs, max_points, step
    parameter = "Re_x"
    start = 1e4
    stop = 1e5

    [sweep]           # for `bvpkit sweep`: the first grid key is the fast axis
    outputs = ["wall_shear"]
    [sweep.grid]
    Re_x = { from = 1e4, to = 1e6, count = 30, spacing = "geometric" }

    [save]            # files written by `bvpkit solve`, relative to the working directory
    solution_csv = "plate.csv"
    report_json = "plate.json"

Errors name the file, the key path and what was expected.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Annotated, Any

from pydantic import BaseModel, ConfigDict, Field, StrictBool, StrictFloat, StrictInt, StrictStr
from pydantic import ValidationError

from .errors import BvpkitError, ExpressionError, SpecError
from .problem import Problem

#: Spec files larger than this are refused unread: a real spec is a few kilobytes.
MAX_SPEC_BYTES = 1_000_000

Number = StrictInt | StrictFloat
End = StrictInt | StrictFloat | StrictStr


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True)


class RegionSection(_Model):
    end: StrictStr | Number | None = None
    equations: list[StrictStr] | None = None
    constants: dict[str, Number] = {}


class ProblemSection(_Model):
    independent: StrictStr = "x"
    domain: Annotated[list[End], Field(min_length=2, max_length=2)]
    equations: Annotated[list[StrictStr], Field(min_length=1, max_length=200)]
    conditions: Annotated[list[StrictStr], Field(max_length=1000)]
    unknowns: list[StrictStr] | None = None
    constants: dict[str, Number] = {}
    unknown_parameters: dict[str, Number] = {}
    guess: dict[str, StrictStr | Number] = {}
    eigenvalue: StrictStr | None = None
    mode: StrictInt | None = None
    regions: list[RegionSection] | None = None


class SolverSection(_Model):
    method: StrictStr = "auto"
    tol: Number | None = None
    max_nodes: StrictInt | None = None
    verify: StrictBool | None = None
    truncation: Number | None = None
    homotopy: StrictStr | None = None
    time_limit: Number | None = None


class TraceSection(_Model):
    parameter: StrictStr
    start: Number
    stop: Number
    outputs: list[StrictStr] | None = None
    max_points: StrictInt | None = None
    step: Number | None = None


class RangeModel(_Model):
    start: Number = Field(alias="from")
    stop: Number = Field(alias="to")
    count: StrictInt
    spacing: StrictStr = "linear"


class SweepSection(_Model):
    grid: dict[str, list[Number] | RangeModel]
    outputs: list[StrictStr] | None = None


class SaveSection(_Model):
    solution_csv: StrictStr | None = None
    report_json: StrictStr | None = None


class Spec(_Model):
    title: StrictStr = ""
    description: StrictStr = ""
    problem: ProblemSection
    solver: SolverSection = SolverSection()
    outputs: dict[str, StrictStr] = {}
    save: SaveSection = SaveSection()
    trace: TraceSection | None = None
    sweep: SweepSection | None = None


def _where(loc: tuple[Any, ...]) -> str:
    return ".".join(str(part) for part in loc) or "(top level)"


def _explain(error: ValidationError, source: str) -> SpecError:
    # An unknown key is usually the cause of a "missing" one (a misspelt key): name it first.
    errors = sorted(error.errors(), key=lambda e: e["type"] != "extra_forbidden")
    first = errors[0]
    loc = _where(first["loc"])
    kind = first["type"]
    if kind == "extra_forbidden":
        what = f"unknown key '{loc}'"
        parent = first["loc"][:-1]
        known = _known_keys(parent)
        if known:
            what += f" (known keys here: {', '.join(known)})"
    elif kind == "missing":
        what = f"missing key '{loc}'"
    else:
        shown = repr(first.get("input"))
        if len(shown) > 60:
            shown = shown[:60] + "..."
        what = f"{loc}: {first['msg'].lower()}, got {shown}"
    more = len(error.errors()) - 1
    tail = f" (and {more} more problem{'s' if more > 1 else ''})" if more else ""
    return SpecError(f"{source}: {what}{tail}")


def _known_keys(parent: tuple[Any, ...]) -> list[str]:
    model: type[BaseModel] = Spec
    for part in parent:
        field = model.model_fields.get(str(part))
        if field is None or not isinstance(field.annotation, type) or not issubclass(field.annotation, BaseModel):
            return []
        model = field.annotation
    return list(model.model_fields)


def parse_spec(text: str, source: str = "<spec>") -> Spec:
    """Validate TOML text into a :class:`Spec` model."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise SpecError(f"{source}: not valid TOML: {err}") from None
    except RecursionError:
        raise SpecError(f"{source}: TOML nested too deeply") from None
    try:
        return Spec.model_validate(data)
    except ValidationError as err:
        raise _explain(err, source) from None


def to_problem(spec: Spec, source: str = "<spec>") -> Problem:
    """Build the :class:`Problem` a validated spec describes."""
    section = spec.problem
    settings = {k: v for k, v in spec.solver.model_dump().items() if v is not None}
    settings["save"] = spec.save.model_dump()
    if spec.trace is not None:
        settings["trace"] = {k: v for k, v in spec.trace.model_dump().items() if v is not None}
    if spec.sweep is not None:
        settings["sweep"] = {"grid": {name: _values(name, axis, source) for name, axis in spec.sweep.grid.items()},
                             "outputs": spec.sweep.outputs}
    try:
        return Problem(
            equations=section.equations,
            conditions=section.conditions,
            domain=tuple(section.domain),
            independent=section.independent,
            unknowns=section.unknowns,
            constants=section.constants,
            unknown_parameters=section.unknown_parameters,
            guess=section.guess,
            outputs=spec.outputs,
            settings=settings,
            title=spec.title,
            eigenvalue=section.eigenvalue,
            mode=section.mode,
            regions=[r.model_dump(exclude_none=True) for r in section.regions] if section.regions else None,
        )
    except ExpressionError as err:
        raise SpecError(f"{source}: [problem] {err.one_line()}") from err
    except BvpkitError as err:
        raise SpecError(f"{source}: [problem] {err}") from err


def _values(name: str, axis: Any, source: str) -> list[float]:
    """A grid axis: a list as given, or ``{from, to, count, spacing = linear | geometric}``."""
    from . import limits
    from .sweep import axis_values

    try:
        if isinstance(axis, list):
            return [limits.check_value(v, f"value of '{name}'") for v in axis]
        return axis_values(name, axis.start, axis.stop, axis.count, axis.spacing)
    except BvpkitError as err:
        raise SpecError(f"{source}: sweep.grid.{name}: {err}") from None


def loads(text: str, source: str = "<spec>") -> Problem:
    """TOML text -> :class:`Problem`."""
    return to_problem(parse_spec(text, source), source)


def load(path: str | Path) -> Problem:
    """Read a spec file -> :class:`Problem` (solver settings and outputs carried along)."""
    path = Path(path)
    try:
        size = path.stat().st_size
        if size > MAX_SPEC_BYTES:
            raise SpecError(f"{path}: {size} bytes; spec files are limited to {MAX_SPEC_BYTES}")
        with open(path, "rb") as handle:
            raw = handle.read(MAX_SPEC_BYTES + 1)
    except FileNotFoundError:
        raise SpecError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise SpecError(f"{path}: is a folder, not a spec file") from None
    except OSError as err:
        raise SpecError(f"{path}: cannot read ({err.strerror})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as err:
        raise SpecError(f"{path}: not UTF-8 text (byte {err.start})") from None
    return loads(text, str(path))
