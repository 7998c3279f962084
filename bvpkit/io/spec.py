"""TOML spec files -> validated models -> :class:`~bvpkit.Problem`.

A spec (all keys but ``[problem]``'s ``domain``, ``equations`` and ``conditions`` optional)::

    title = "Laminar layer on our test plate"

    [problem]
    independent = "eta"
    domain = [0, "inf"]
    equations = ["f''' + f*f''/2 = 0"]
    conditions = ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"]
    constants = { Re_x = 2.0e5 }     # a complex value: w = { re = 0.0, im = 7.3e-5 }
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

    [trace]           # for `bvpkit trace`: parameter, start, stop, outputs, max_points, step,
                      # at (values solved exactly), return_to, branch_switching, stability

    parameter = "Re_x"
    start = 1e4
    stop = 1e5

    [sweep]           # for `bvpkit sweep`: the first grid key is the fast axis
    outputs = ["wall_shear"]
    [sweep.grid]
    Re_x = { from = 1e4, to = 1e6, count = 30, spacing = "geometric" }

    [fit]             # for `bvpkit fit`: data (a CSV file, relative to the spec), vary, sigma, bounds
    data = "plate_readings.csv"
    vary = { Re_x = 1.0e5 }

    [units]           # optional labels in summaries, CSV headers and plots (never converted)
    Re_x = "1"        # any name of the problem: variable, constants, functions, outputs

    [save]            # files written by `bvpkit solve`, relative to the working directory
    solution_csv = "plate.csv"
    report_json = "plate.json"

Errors name the file, the key path and what was expected.
"""

from __future__ import annotations

import difflib
import tomllib
import types
import typing
from pathlib import Path
from typing import Annotated, Any

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    StrictBool,
    StrictFloat,
    StrictInt,
    StrictStr,
    ValidationError,
    create_model,
)

from ..errors import BvpkitError, ExpressionError, SpecError
from ..language import limits
from ..language.options import OPTIONS
from ..language.problem import Problem
from ..language.units import check_units, names_with_units
from .specfile import read_spec

Number = StrictInt | StrictFloat
End = StrictInt | StrictFloat | StrictStr


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True)


class ComplexNumber(_Model):
    """A complex number in a spec: ``{ re = 1.0, im = 0.5 }`` (a part left out is zero)."""

    re: Number = 0.0
    im: Number = 0.0


#: A constant or a start value: a number, or a complex one.
Value = Number | ComplexNumber


def _value(v: Any) -> Any:
    return complex(v.re, v.im) if isinstance(v, ComplexNumber) else v


class RegionSection(_Model):
    end: StrictStr | Number | None = None
    equations: list[StrictStr] | None = None
    constants: dict[str, Value] = {}


class ProblemSection(_Model):
    independent: StrictStr = "x"
    domain: Annotated[list[End], Field(min_length=2, max_length=2)]
    equations: Annotated[list[StrictStr], Field(min_length=1, max_length=200)]
    conditions: Annotated[list[StrictStr], Field(max_length=1000)]
    unknowns: list[StrictStr] | None = None
    constants: dict[str, Value] = {}
    unknown_parameters: dict[str, Value] = {}
    guess: dict[str, StrictStr | Number] = {}
    eigenvalue: StrictStr | None = None
    mode: StrictInt | None = None
    regions: list[RegionSection] | None = None


#: The ``[solver]`` table: one key per solve option (language/options.py), of its kind.
_KINDS = {"number": Number, "count": StrictInt, "switch": StrictBool, "word": StrictStr}
SolverSection = create_model("SolverSection", __base__=_Model,
                             **{o.name: (_KINDS[o.kind] | None, None) for o in OPTIONS.values()})


class TraceSection(_Model):
    parameter: StrictStr
    start: Number
    stop: Number
    outputs: list[StrictStr] | None = None
    max_points: StrictInt | None = None
    step: Number | None = None
    at: list[Number] | None = None
    return_to: Number | None = None
    branch_switching: StrictBool | None = None
    stability: StrictBool | None = None


class FoldCurveSection(_Model):
    parameter: StrictStr
    along: StrictStr
    start: Number
    stop: Number
    outputs: list[StrictStr] | None = None
    at: list[Number] | None = None
    search: Annotated[list[Number], Field(min_length=2, max_length=2)] | None = None
    max_points: StrictInt | None = None


class GridRange(_Model):
    start: Number = Field(alias="from")
    stop: Number = Field(alias="to")
    count: StrictInt
    spacing: StrictStr = "linear"


class SweepSection(_Model):
    grid: dict[str, list[Number] | GridRange]
    outputs: list[StrictStr] | None = None


class FitSection(_Model):
    data: StrictStr | None = None
    vary: dict[str, Number]
    sigma: Number | dict[str, Number] | None = None
    bounds: dict[str, Annotated[list[Number], Field(min_length=2, max_length=2)]] | None = None


class SaveSection(_Model):
    solution_csv: StrictStr | None = None
    report_json: StrictStr | None = None


class Spec(_Model):
    title: StrictStr = ""
    description: StrictStr = ""
    problem: ProblemSection
    solver: SolverSection = SolverSection()
    outputs: dict[str, StrictStr] = {}
    units: dict[str, StrictStr] = {}
    save: SaveSection = SaveSection()
    trace: TraceSection | None = None
    fold_curve: FoldCurveSection | None = None
    sweep: SweepSection | None = None
    fit: FitSection | None = None


#: At most this many problems of one spec are written out in full; a file with more is far
#: from a spec (a fuzzer's, or the wrong file), and the first ones say so well enough.
MAX_LISTED = 25


def _explain(error: ValidationError, source: str) -> SpecError:
    """Every problem pydantic found, in our own words: the key path, what was expected, what
    the file holds, and how to write it (never pydantic's type names or our class names)."""
    found: dict[str, list[dict[str, Any]]] = {}
    for item in error.errors():
        path, annotation = _walk(item["loc"])
        # a location longer than its key path holds pydantic's label of a union member
        entry = dict(item, annotation=annotation, member=len(item["loc"]) > len(path))
        found.setdefault(_where(path), []).append(entry)
    # A union reports each member's complaint; when one member got further (the list a grid
    # axis is, the table it is not), the shallow complaints about the others are noise.
    paths = list(found)
    deeper = [p for p in paths if not (all(e["member"] for e in found[p])
                                       and any(q.startswith((p + ".", p + " (")) for q in paths))]
    # an unknown key first: it is usually the cause of a "missing" one (a misspelt key), which
    # is then said with it and not again
    deeper.sort(key=lambda p: not any(e["type"] == "extra_forbidden" for e in found[p]))
    explained: set[str] = set()
    lines = []
    for path in deeper:
        if path in explained:
            continue
        line, meant = _say(path, found[path], found)
        lines.append(line)
        if meant:
            explained.add(meant)
    if len(lines) == 1:
        return SpecError(f"{source}: {lines[0]}")
    shown = lines[:MAX_LISTED]
    cut = (f"; these are the first {MAX_LISTED} of {len(lines)} problems: correct them and run again"
           if len(lines) > MAX_LISTED else "")
    return SpecError(f"{source}: {len(lines)} problems: "
                     + "; ".join(f"({i + 1}) {line}" for i, line in enumerate(shown)) + cut)


def _say(path: str, errors: list[dict[str, Any]], found: dict[str, list]) -> tuple[str, str | None]:
    """One problem in words, and the path of a missing key it explains (a misspelling), if any."""
    kinds = {e["type"] for e in errors}
    first = errors[0]
    expected = _expected(first["annotation"])
    if "extra_forbidden" in kinds:
        parent = path.rsplit(".", 1)[0] if "." in path else ""
        known = _known_keys(first["loc"][:-1])
        text = f"unknown key '{path}'"
        match = difflib.get_close_matches(path.rsplit(".", 1)[-1], known, n=1, cutoff=0.6)
        meant = f"{parent}.{match[0]}" if parent and match else match[0] if match else None
        if meant in found and any(e["type"] == "missing" for e in found[meant]):
            text += f" (did you mean '{match[0]}'? it is missing)"
        elif match:
            text += f" (did you mean '{match[0]}'?)"
        else:
            meant = None
        if known:
            text += f"; known keys{' in ' + parent if parent else ''}: {', '.join(known)}"
        return text, meant
    if "missing" in kinds:
        return f"missing key '{path}' (expected {expected})", None
    if kinds & {"too_short", "too_long"}:
        ctx = next(e.get("ctx") or {} for e in errors if e["type"] in ("too_short", "too_long"))
        low, high = ctx.get("min_length"), ctx.get("max_length")
        field = _field(first["loc"])
        for rule in field.metadata if field is not None else []:
            low = getattr(rule, "min_length", low) if low is None else low
            high = getattr(rule, "max_length", high) if high is None else high
        if low is not None and low == high:
            wanted = f"exactly {low} item{'s' if low != 1 else ''}"
        elif first["type"] == "too_short":
            wanted = f"at least {low} item{'s' if low != 1 else ''}"
        else:
            wanted = f"at most {high} items"
        return f"{path}: expected {wanted}, got {ctx.get('actual_length', len(first['input']))}", None
    value = first.get("input")
    return f"{path}: expected {expected}, got {_shown(value)}{_hint(first['annotation'], value)}", None


def _walk(loc: tuple[Any, ...]) -> tuple[list[Any], Any]:
    """The key path a person wrote (pydantic's union labels dropped) and the type expected there."""
    annotation: Any = Spec
    path: list[Any] = []
    parts = list(loc)
    at_path = annotation  # the type of the last key in the path, before any union label
    while parts:
        annotation = _bare(annotation)
        members = _members(annotation)
        if len(members) > 1:  # pydantic labels the member that complained: skip the label
            label = str(parts.pop(0))
            annotation = next((m for m in members if _label_matches(m, label)), annotation)
            continue
        if len(members) == 1 and members[0] is not annotation:
            annotation = members[0]
            continue
        part = parts.pop(0)
        path.append(part)
        if isinstance(annotation, type) and issubclass(annotation, BaseModel):
            field = next((f for n, f in annotation.model_fields.items() if part in (n, f.alias)), None)
            annotation = field.annotation if field is not None else None
        elif typing.get_origin(annotation) is list:
            annotation = typing.get_args(annotation)[0]
        elif typing.get_origin(annotation) is dict:
            annotation = typing.get_args(annotation)[1]
        else:
            annotation = None
        at_path = annotation
    return path, at_path


def _where(path: list[Any]) -> str:
    text = ""
    for part in path:
        if isinstance(part, int):
            text += f" (item {part + 1})"
        else:
            text += ("." if text else "") + str(part)
    return text or "(top level)"


def _bare(annotation: Any) -> Any:
    while typing.get_origin(annotation) is typing.Annotated:
        annotation = typing.get_args(annotation)[0]
    return annotation


def _members(annotation: Any) -> list[Any]:
    """The members of a union (None left out), or ``[annotation]``."""
    if typing.get_origin(annotation) in (typing.Union, types.UnionType):
        return [_bare(m) for m in typing.get_args(annotation) if m is not type(None)]
    return [annotation]


def _label_matches(member: Any, label: str) -> bool:
    if isinstance(member, type) and issubclass(member, BaseModel):
        return label == member.__name__
    origin = typing.get_origin(member)
    if origin is not None:
        return label.startswith(origin.__name__)
    return isinstance(member, type) and label == member.__name__


def _model_in(annotation: Any) -> Any:
    """The model class an annotation names (alone or in a union), or None."""
    return next((m for m in _members(_bare(annotation)) if isinstance(m, type) and issubclass(m, BaseModel)),
                None)


def _field(loc: tuple[Any, ...]) -> Any:
    """The model field a location ends on (its length rules), or None."""
    parent = _walk(loc[:-1])[1] if loc[:-1] else Spec
    model = _model_in(parent)
    if model is None:
        return None
    return next((f for n, f in model.model_fields.items() if loc[-1] in (n, f.alias)), None)


_KIND_WORDS = {bool: "true or false", int: "a whole number", float: "a number", str: "text in quotes"}


def _expected(annotation: Any) -> str:
    """What a key holds, in words (with an example for the tables)."""
    members = _members(_bare(annotation))
    kinds = set(members)
    if kinds == {int, float}:
        return "a number"
    if kinds == {str, int, float}:
        return "a number or an expression in quotes"
    if kinds == {int, float, ComplexNumber}:
        return "a number, or a complex one such as { re = 1.0, im = 0.5 }"
    if len(members) > 1:
        return " or ".join(_expected(m) for m in members)
    annotation = members[0]
    if annotation is ComplexNumber:
        return "a complex number such as { re = 1.0, im = 0.5 }"
    if annotation is GridRange:
        return 'a table such as { from = 0.1, to = 10.0, count = 20, spacing = "geometric" }'
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return f"a table (keys: {', '.join(f.alias or n for n, f in annotation.model_fields.items())})"
    origin = typing.get_origin(annotation)
    if origin is list:
        return f"a list of {_plural(typing.get_args(annotation)[0])}"
    if origin is dict:
        return f"a table of names, each {_expected(typing.get_args(annotation)[1])}"
    return _KIND_WORDS.get(annotation, "another kind of value")


def _plural(annotation: Any) -> str:
    words = _expected(annotation)
    for one, many in (("a number or an expression in quotes", "numbers or expressions in quotes"),
                      ("a whole number", "whole numbers"), ("a number", "numbers"),
                      ("text in quotes", "texts in quotes")):
        words = words.replace(one, many)
    return "tables" + words[len("a table"):] if words.startswith("a table") else words


def _shown(value: Any) -> str:
    """A value from the file as a person wrote it in TOML."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return f"the number {value!r}"
    if isinstance(value, str):
        text = value if len(value) <= 60 else value[:60] + "..."
        return f"the text {text!r}"
    if isinstance(value, list):
        return f"a list of {len(value)} item{'s' if len(value) != 1 else ''}"
    if isinstance(value, dict):
        keys = ", ".join(list(map(str, value))[:8]) + (", ..." if len(value) > 8 else "")
        return f"a table (keys: {keys})" if value else "an empty table"
    return f"the {type(value).__name__.replace('datetime', 'date and time')} {str(value)[:40]}"


def _hint(annotation: Any, value: Any) -> str:
    """How to write what was meant, when the mistake is a common one."""
    kinds = set(_members(_bare(annotation)))
    if isinstance(value, str) and kinds & {int, float} and str not in kinds:
        try:
            number = float(value)
        except ValueError:
            try:
                z = complex(value.replace(" ", ""))
            except ValueError:
                return ""
            return f" (write a complex number as {{ re = {z.real!r}, im = {z.imag!r} }})" if ComplexNumber in kinds \
                else ""
        if int in kinds and float not in kinds and not number.is_integer():
            return ""
        return " (write it without quotes)"
    if isinstance(value, str) and bool in kinds and value.strip().lower() in ("true", "false"):
        return " (write true or false without quotes)"
    if isinstance(value, float) and kinds == {int} and value.is_integer():
        return f" (write it without a decimal point: {int(value)})"
    if isinstance(value, int | float) and not isinstance(value, bool) and kinds == {str}:
        return " (put it in quotes)"
    return ""


def _known_keys(parent: tuple[Any, ...]) -> list[str]:
    annotation = _walk(parent)[1] if parent else Spec
    model = _model_in(annotation)
    if model is None:
        return []
    return [f.alias or n for n, f in model.model_fields.items()]


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
    if spec.units:
        settings["units"] = dict(spec.units)
    if spec.trace is not None:
        settings["trace"] = {k: v for k, v in spec.trace.model_dump().items() if v is not None}
    if spec.fold_curve is not None:
        settings["fold_curve"] = {k: v for k, v in spec.fold_curve.model_dump().items() if v is not None}
    if spec.fit is not None:
        settings["fit"] = {k: v for k, v in spec.fit.model_dump().items() if v is not None}
    if spec.sweep is not None:
        grid = {name: _values(name, axis, source) for name, axis in spec.sweep.grid.items()}
        settings["sweep"] = {"grid": grid, "outputs": spec.sweep.outputs}
    try:
        problem = Problem(
            equations=section.equations,
            conditions=section.conditions,
            domain=tuple(section.domain),
            independent=section.independent,
            unknowns=section.unknowns,
            constants={k: _value(v) for k, v in section.constants.items()},
            unknown_parameters={k: _value(v) for k, v in section.unknown_parameters.items()},
            guess=section.guess,
            outputs=spec.outputs,
            settings=settings,
            title=spec.title,
            eigenvalue=section.eigenvalue,
            mode=section.mode,
            regions=[_region(r) for r in section.regions] if section.regions else None,
        )
    except ExpressionError as err:
        raise SpecError(f"{source}: {_section(str(err))} {err.one_line()}") from err
    except BvpkitError as err:
        raise SpecError(f"{source}: {_section(str(err))} {err}") from err
    if spec.units:

        try:
            check_units(spec.units, names_with_units(problem), "[units]")
        except BvpkitError as err:
            raise SpecError(f"{source}: {err}") from None
    return problem


def _region(region: RegionSection) -> dict[str, Any]:
    found = region.model_dump(exclude_none=True)
    found["constants"] = {k: _value(v) for k, v in region.constants.items()}
    return found


def _values(name: str, axis: Any, source: str) -> list[float]:
    """A grid axis: a list as given, or ``{from, to, count, spacing = linear | geometric}``."""
    from ..families.sweep import axis_values

    try:
        if isinstance(axis, list):
            return [limits.check_value(v, f"value of '{name}'") for v in axis]
        return axis_values(name, axis.start, axis.stop, axis.count, axis.spacing)
    except BvpkitError as err:
        raise SpecError(f"{source}: sweep.grid.{name}: {err}") from None


def _section(said: str) -> str:
    """The section of the spec a problem's error is about: outputs live under [outputs]."""
    return "[outputs]" if said.startswith("output '") else "[problem]"


def loads(text: str, source: str = "<spec>") -> Problem:
    """TOML text -> :class:`Problem`."""
    return to_problem(parse_spec(text, source), source)


def load(path: str | Path) -> Problem:
    """Read a spec file -> :class:`Problem` (solver settings and outputs carried along)."""
    return loads(read_spec(path), str(Path(path)))
