"""Figures of traced branches and sweeps, ready to put in a report (the ``plot`` extra).

All figure drawing of bvpkit lives here; ``Branch.plot``, ``FoldCurve.plot`` and ``SweepResult.plot`` call
these functions. Figures are drawn on matplotlib's object interface with its file-only
canvas, so drawing changes no global state (no pyplot figure manager, no backend switch):
it is safe from scripts, notebooks and threads alike.

What a figure shows:

* every requested output on its own panel, sharing the horizontal axis;
* axis labels from the names, with units where the problem gives them (``[units]`` in a
  spec, ``settings={"units": ...}`` from Python), and the problem's title on top;
* for a branch: a smooth curve through the computed points (a monotone cubic in the
  arclength, so a branch of ten points around a fold is not drawn as a polygon), the points
  themselves, folds and branch points marked and listed in the legend, stable and unstable
  parts drawn apart where the branch carries its stability;
* for a fold curve (:func:`fold_curve_figure`): the first constant at the fold against the
  second, then each output at the fold, cusps and requested values marked;
* for a sweep: one curve per value of the slower parameters, a logarithmic axis where the
  grid is geometric, failed points left out and counted below the chart;
* for one solution (:func:`solution_figure`): each unknown function against the independent
  variable, the outputs that are a function's value at a point marked on its panel, the
  others listed in the legend, interfaces between regions dotted.

A legend appears only when it explains something (more than one curve, or marks).
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import MissingExtraError, OptionError
from ..language.units import label, units_of
from ..reduce.mapping import positions

#: Width of a figure in inches, and the height of one panel: a page column at full width.
FIGURE_WIDTH, PANEL_HEIGHT = 6.6, 2.9
#: Dots per inch of raster files: sharp when printed at the width above.
DPI = 150
#: Samples of the smooth curve drawn through a branch's points.
CURVE_SAMPLES = 600
#: Title lines wrap at this many characters (a long spec title stays inside the figure).
TITLE_WIDTH = 72
#: Positive values spanning more than this ratio get a logarithmic value axis in a sweep
#: chart whose horizontal axis is already logarithmic (a log-log chart reads as straight
#: lines where the quantity follows a power law, as effectiveness charts usually do).
LOG_SPAN = 30.0

_FOLD_STYLE = dict(marker="o", ms=7, mfc="white", mew=1.8, color="tab:red", ls="none", zorder=5)
_BRANCH_POINT_STYLE = dict(marker="D", ms=6.5, mfc="white", mew=1.8, color="tab:purple", ls="none", zorder=5)
_POINT_STYLE = dict(marker=".", ms=4.5, color="0.25", ls="none", zorder=4)


def _figure(panels: int):  # noqa: ANN202 - (Figure, list of Axes)
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:
        raise MissingExtraError('plotting needs matplotlib: pip install ".[plot]"') from None
    fig = Figure(figsize=(FIGURE_WIDTH, 1.3 + PANEL_HEIGHT * panels), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(panels, 1, sharex=True, squeeze=False)[:, 0]
    return fig, list(axes)


def _finish(fig, axes, title: str, path: str | Path) -> None:  # noqa: ANN001
    if title:
        lines = [line for part in title.split("\n") for line in textwrap.wrap(part, TITLE_WIDTH)]
        fig.suptitle("\n".join(lines), fontsize=11)
    for ax in axes:
        ax.grid(True, which="major", alpha=0.35)
        ax.grid(True, which="minor", alpha=0.12)
    fig.savefig(path)


def _title_and_units(source: Any, title: str | None,
                     units: Mapping[str, str] | None) -> tuple[str, dict, str | None]:
    prepared = getattr(source, "prepared", None)
    if title is None:
        title = getattr(prepared, "title", "") or default_title(prepared)
    found = dict(units_of(prepared)) if prepared is not None else {}
    found.update(units or {})
    return title, found, getattr(prepared, "independent", None)


def _arclength(columns: Sequence[np.ndarray]) -> np.ndarray:
    """Cumulative distance between successive points, each coordinate scaled by its range."""
    steps = np.zeros(columns[0].size - 1)
    for c in columns:
        span = np.ptp(c)
        if span > 0:
            steps += (np.diff(c) / span) ** 2
    return np.concatenate([[0.0], np.cumsum(np.sqrt(steps))])


def smooth_through(parameter: np.ndarray, values: Sequence[np.ndarray],
                   samples: int = CURVE_SAMPLES) -> tuple[np.ndarray, np.ndarray, list[np.ndarray]]:
    """A smooth curve through a branch's points: a monotone cubic (PCHIP) of each coordinate
    in the arclength, so the curve passes through every point, turns at folds and never
    overshoots between two points.

    Parameters
    ----------
    parameter : ndarray, shape (N,)
    values : sequence of ndarray, shape (N,)
        The outputs at the same points.

    Returns
    -------
    s : ndarray, shape (samples,)
        The arclength of each sample (the points lie at ``_arclength``).
    curve_parameter : ndarray, shape (samples,)
    curve_values : list of ndarray, shape (samples,)
    """
    from scipy.interpolate import PchipInterpolator

    parameter = np.asarray(parameter, float)
    values = [np.asarray(v, float) for v in values]
    s = _arclength([parameter, *values])
    keep = np.concatenate([[True], np.diff(s) > 0])  # repeated points would stall the cubic
    if keep.sum() < 3:
        return s, parameter, values
    fine = np.union1d(np.linspace(0.0, s[keep][-1], samples), s[keep])  # through every point exactly
    curve = [PchipInterpolator(s[keep], c[keep])(fine) for c in (parameter, *values)]
    return fine, curve[0], curve[1:]


def branch_figure(branch: Any, path: str | Path, outputs: Sequence[str] | None = None, *,
                  title: str | None = None, units: Mapping[str, str] | None = None) -> Any:
    """Draw a traced branch: each output against the parameter on its own panel.

    Parameters
    ----------
    branch : Branch
        From :func:`bvpkit.trace`.
    path : str or Path
        The file; its suffix names the format (png, pdf, svg, ...).
    outputs : sequence of str, optional
        Which outputs (default: all the branch recorded).
    title : str, optional
        Default: the problem's title.
    units : mapping of str to str, optional
        Units of names, added to (and overriding) the problem's own.

    Returns
    -------
    matplotlib.figure.Figure
        The figure written (its axes and legend can be inspected or restyled and saved again).
    """
    recorded = branch.outputs
    names = list(outputs) if outputs is not None else list(recorded)
    if not names:
        raise OptionError("the branch records no outputs to draw; trace it with outputs=[...]")
    unknown = [n for n in names if n not in recorded]
    if unknown:
        raise OptionError(f"'{unknown[0]}' is not an output of this branch "
                          f"(it records: {', '.join(recorded)})")
    parameter = np.asarray(branch.parameter, float)
    if parameter.size == 0:
        raise OptionError("the branch holds no points to draw")
    source = branch.solutions[0] if branch.solutions else None
    title, units, independent = _title_and_units(source, title, units)
    if source is not None:  # a spec's title may describe more than this cut of the problem
        title = _held(title, source.prepared, [branch.name], units)
    columns = [np.asarray(recorded[n], float) for n in names]
    good = np.isfinite(parameter) & np.all([np.isfinite(c) for c in columns], axis=0)
    s_points = _arclength([parameter[good], *(c[good] for c in columns)]) if good.any() else np.zeros(0)
    fine, curve_p, curve_v = smooth_through(parameter[good], [c[good] for c in columns])
    stability = _stability(branch, good)
    folds = list(getattr(branch, "folds", []) or [])
    branch_points = list(getattr(branch, "branch_points", []) or [])

    fig, axes = _figure(len(names))
    for panel, (ax, name, column) in enumerate(zip(axes, names, columns)):
        legend_here = panel == 0
        _draw_curve(ax, fine, curve_p, curve_v[panel], s_points, stability, legend_here)
        ax.plot(parameter[good], column[good], label="computed points" if legend_here else None,
                **_POINT_STYLE)
        for fold in folds:
            y = fold.outputs.get(name, math.nan)
            words = f"fold at {branch.name} = {fold.parameter:.6g}"
            ax.plot([fold.parameter], [y], label=words if legend_here else None, **_FOLD_STYLE)
        for point in branch_points:
            y = getattr(point, "outputs", {}).get(name, math.nan)
            ax.plot([point.parameter], [y], label=f"branch point at {branch.name} = {point.parameter:.6g}"
                    if legend_here else None, **_BRANCH_POINT_STYLE)
        ax.set_ylabel(label(name, units, independent))
    axes[-1].set_xlabel(label(branch.name, units, independent))
    marks = len(folds) + len(branch_points) + (stability is not None)
    if marks:
        axes[0].legend(loc="best", fontsize=8.5, framealpha=0.9)
    _finish(fig, axes, title, path)
    return fig


def _stability(branch: Any, good: np.ndarray) -> np.ndarray | None:
    """The branch's stability per drawn point (True, False or None), if it carries one."""
    found = getattr(branch, "stability", None)
    if found is None:
        return None
    flags = list(found)
    if len(flags) != good.size or all(f is None for f in flags):
        return None
    return np.array(flags, dtype=object)[good]


def _draw_curve(ax, fine, curve_p, curve_v, s_points, stability, legend_here: bool) -> None:  # noqa: ANN001
    if stability is None or s_points.size == 0:
        ax.plot(curve_p, curve_v, "-", color="tab:blue", lw=1.8, zorder=3)
        return
    # each sample takes the stability of its nearest computed point; runs drawn one by one
    nearest = np.abs(fine[:, None] - s_points[None, :]).argmin(axis=1)
    kinds = stability[nearest]
    styles = {True: ("-", "tab:blue", "stable"), False: ("--", "tab:orange", "unstable"),
              None: (":", "0.45", "stability not known")}
    shown: set = set()
    start = 0
    for i in range(1, kinds.size + 1):
        if i < kinds.size and kinds[i] == kinds[start]:
            continue
        ls, colour, words = styles[kinds[start]]
        stop = min(i + 1, kinds.size)  # overlap one sample: no gap between runs
        first = legend_here and kinds[start] not in shown
        ax.plot(curve_p[start:stop], curve_v[start:stop], ls=ls, color=colour, lw=1.8, zorder=3,
                label=words if first else None)
        shown.add(kinds[start])
        start = i


def sweep_figure(result: Any, path: str | Path, outputs: Sequence[str] | None = None, *,
                 title: str | None = None, units: Mapping[str, str] | None = None) -> Any:
    """Draw a sweep as a design chart: each output against the first (fast) parameter, one
    curve per value of the slower ones, on its own panel.

    Parameters
    ----------
    result : SweepResult
        From :func:`bvpkit.sweep`.
    path : str or Path
        The file; its suffix names the format.
    outputs : sequence of str, optional
        Which outputs (default: all).
    title : str, optional
        Default: the problem's title, where the result knows its problem.
    units : mapping of str to str, optional
        Units of names, added to (and overriding) the problem's own.

    Returns
    -------
    matplotlib.figure.Figure
    """
    names = list(outputs) if outputs is not None else list(result.outputs)
    if not names:
        raise OptionError("the sweep has no outputs to draw; give outputs=[...]")
    unknown = [n for n in names if n not in result.outputs]
    if unknown:
        raise OptionError(f"'{unknown[0]}' is not an output of this sweep "
                          f"(it has: {', '.join(result.outputs)})")
    if not result.table:
        raise OptionError("the sweep holds no finished points to draw")
    title, units, independent = _title_and_units(result, title, units)
    axes_names = list(result.parameters)
    fast, slower = axes_names[0], axes_names[1:]
    groups: dict[tuple, list[dict]] = {}
    for row in result.table:
        groups.setdefault(tuple(row[n] for n in slower), []).append(row)
    keys = sorted(groups)
    fig, axes = _figure(len(names))
    try:
        from matplotlib import colormaps
    except ImportError:  # pragma: no cover - matplotlib older than 3.5
        raise MissingExtraError('plotting needs matplotlib >= 3.7: pip install ".[plot]"') from None
    colours = colormaps["viridis"](np.linspace(0.0, 0.85, max(len(keys), 1)))
    log_x = _geometric(result.parameters[fast])
    failed = sum(not row["success"] for row in result.table)
    for panel, (ax, name) in enumerate(zip(axes, names)):
        drawn = []
        for colour, key in zip(colours, keys):
            rows = sorted(groups[key], key=lambda r: r[fast])
            xs = np.array([r[fast] for r in rows], float)
            ys = np.array([_number(r.get(name)) if r["success"] else math.nan for r in rows])
            words = ", ".join(f"{n} = {v:g}{_unit(n, units)}" for n, v in zip(slower, key)) or None
            style = "-" if xs.size > 12 else "-o"
            ax.plot(xs, ys, style, color=colour, lw=1.7, ms=3.5, label=words if panel == 0 else None)
            drawn.append(ys[np.isfinite(ys)])
        if log_x:
            _log_axis(ax.xaxis, np.asarray(result.parameters[fast], float))
        values = np.concatenate(drawn) if drawn else np.zeros(0)
        if log_x and values.size and values.min() > 0 and values.max() / values.min() > LOG_SPAN:
            _log_axis(ax.yaxis, values)
        ax.set_ylabel(label(name, units, independent))
    axes[-1].set_xlabel(label(fast, units, independent))
    if len(keys) > 1:
        axes[0].legend(loc="best", fontsize=8.5, framealpha=0.9, ncols=1 if len(keys) <= 6 else 2)
    if failed:
        fig.text(0.01, 0.005, f"{failed} of {len(result.table)} points failed and are not drawn",
                 fontsize=8, color="tab:red", ha="left", va="bottom")
    _finish(fig, axes, title, path)
    return fig


def fold_curve_figure(curve: Any, path: str | Path, outputs: Sequence[str] | None = None, *,
                      title: str | None = None, units: Mapping[str, str] | None = None) -> Any:
    """Draw a fold curve: the first constant at the fold against the second on the top panel
    (an ignition or extinction map: on one side of the curve the family has a fold and two
    states, on the other side none), then each output at the fold on its own panel; cusps
    and the requested values marked.

    Parameters
    ----------
    curve : FoldCurve
        From :func:`bvpkit.fold_curve`.
    path : str or Path
        The file; its suffix names the format.
    outputs : sequence of str, optional
        Which outputs (default: all the curve recorded).
    title, units
        As in :func:`branch_figure`.

    Returns
    -------
    matplotlib.figure.Figure
    """
    along = np.asarray(curve.along, float)
    if along.size == 0:
        raise OptionError("the fold curve holds no points to draw")
    recorded = curve.outputs
    names = list(outputs) if outputs is not None else list(recorded)
    unknown = [n for n in names if n not in recorded]
    if unknown:
        raise OptionError(f"'{unknown[0]}' is not an output of this fold curve "
                          f"(it records: {', '.join(recorded)})")
    source = curve.solutions[0] if curve.solutions else None
    title, units, independent = _title_and_units(source, title, units)
    columns = [np.asarray(curve.parameter, float), *(np.asarray(recorded[n], float) for n in names)]
    labels = [f"{label(curve.name, units, independent)} at the fold", *(f"{label(n, units, independent)} at the fold"
                                                                         for n in names)]
    good = np.isfinite(along) & np.all([np.isfinite(c) for c in columns], axis=0)
    _, curve_along, curve_values = smooth_through(along[good], [c[good] for c in columns])
    fig, axes = _figure(len(columns))
    requested = sorted(getattr(curve, "requested", {}) or {})
    for panel, (ax, column, words) in enumerate(zip(axes, columns, labels)):
        first = panel == 0
        ax.plot(curve_along, curve_values[panel], "-", color="tab:red", lw=1.8, zorder=3,
                label=f"fold in {curve.name}" if first else None)
        ax.plot(along[good], column[good], label="computed points" if first else None, **_POINT_STYLE)
        for cusp in curve.cusps:
            at = int(np.argmin(np.abs(along - cusp["along"])))
            ax.plot([cusp["along"]], [column[at]], label=f"cusp at {curve.along_name} = {cusp['along']:.6g}"
                    if first else None, **_BRANCH_POINT_STYLE)
        if requested:
            at = [int(np.argmin(np.abs(along - r))) for r in requested]
            ax.plot(along[at], column[at], ls="none", marker="s", ms=5.5, mfc="white", mew=1.5, color="0.2",
                    zorder=5, label="requested values" if first else None)
        ax.set_ylabel(words)
        if _geometric_range(along[good]):
            _log_axis(ax.xaxis, along[good])
    axes[-1].set_xlabel(label(curve.along_name, units, independent))
    axes[0].legend(loc="best", fontsize=8.5, framealpha=0.9)
    _finish(fig, axes, title, path)
    return fig


#: Points at which a solution's functions are drawn (besides its mesh nodes and interfaces).
PROFILE_SAMPLES = 800
_OUTPUT_STYLE = dict(marker="o", ms=6.5, mfc="white", mew=1.6, color="tab:red", ls="none", zorder=5)


def solution_figure(solution: Any, path: str | Path, functions: Sequence[str] | None = None, *,
                    title: str | None = None, units: Mapping[str, str] | None = None,
                    allow_failed: bool = False) -> Any:
    """Draw one solution: each unknown function against the independent variable on its own
    panel, the outputs that are values of a function at a point marked on its panel (with
    their values in the legend), the other outputs listed in the first panel's legend, and
    interfaces between regions drawn as dotted lines.

    Parameters
    ----------
    solution : Solution
        From :func:`bvpkit.solve`.
    path : str or Path
        The file; its suffix names the format (png, pdf, svg, ...).
    functions : sequence of str, optional
        Which unknown functions (default: all of them).
    title, units
        As in :func:`branch_figure` (the default title, without a spec's, is the equations).
    allow_failed : bool
        Draw a failed solve (the figure then says in red that its numbers are not an answer);
        otherwise a failed solve raises, as its other numbers do.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if not solution.success and not allow_failed:
        solution._check_success("plot", False)
    prepared = solution.prepared
    known = [name for name, _ in prepared.layout.functions]
    names = list(functions) if functions is not None else known
    unknown = [n for n in names if n not in known]
    if unknown:
        raise OptionError(f"'{unknown[0]}' is not an unknown function of this problem (it has: {', '.join(known)})")
    title, units, independent = _title_and_units(solution, title, units)
    title = title or default_title(prepared)
    x = np.asarray(solution.x, float)
    finite = x[np.isfinite(x)]
    if finite.size < 2:
        raise OptionError("the solution holds no finite mesh to draw")
    a, b = float(finite.min()), float(finite.max())
    where = np.union1d(np.linspace(a, b, PROFILE_SAMPLES), finite)
    ends = [float(v) for v in _points(solution)]
    inner = [v for v in ends[1:-1] if a < v < b]
    fig, axes = _figure(len(names))
    marked, listed = _outputs_on_panels(solution, names)
    for panel, (ax, name) in enumerate(zip(axes, names)):
        pieces = _pieces(where, inner)
        for piece in pieces:
            values = np.asarray(solution.evaluate(name, at=piece, allow_failed=True), float)
            ax.plot(piece, values, "-", color="tab:blue", lw=1.8, zorder=3)
        for v in inner:
            ax.axvline(v, ls=":", color="0.45", lw=1.0, zorder=2)
        for output, (point, value) in marked.get(name, {}).items():
            shown = f"{output} = {value:.6g}{_unit(output, units)}"
            ax.plot([point], [value], label=shown, **_OUTPUT_STYLE)
        if panel == 0:  # the outputs that are no point of a curve: listed in the first legend
            for output, value in listed:
                ax.plot([], [], ls="none", label=f"{output} = {value:.6g}{_unit(output, units)}")
        if marked.get(name) or (panel == 0 and listed):
            ax.legend(loc="best", fontsize=8.5, framealpha=0.9, handlelength=0.8)
        ax.set_ylabel(label(name, units, independent))
    axes[-1].set_xlabel(label(independent or solution.independent, units, independent))
    if not solution.success:
        fig.text(0.5, 0.995, f"FAILED ({solution.status.word}): these numbers are not an answer", fontsize=9,
                 color="tab:red", ha="center", va="top")
    _finish(fig, axes, title, path)
    return fig


def _points(solution: Any) -> np.ndarray:
    """Ends and interfaces of the solution's domain in the user's variable."""
    view = solution.interpolant
    return positions(np.asarray(view.maps, float))


def _pieces(where: np.ndarray, inner: Sequence[float]) -> list[np.ndarray]:
    """``where`` cut at the interfaces: a function may jump there, and is drawn region by region."""
    pieces, start = [], float(where[0])
    for cut in [*inner, float(where[-1])]:
        piece = where[(where >= start) & (where <= cut)]
        if piece.size:
            # just inside the interface: the value of this region, not the next
            span = 1e-12 * max(1.0, abs(cut))
            piece = np.clip(piece, start + span if pieces else start, cut - span if cut != where[-1] else cut)
            pieces.append(piece)
        start = cut
    return pieces


def _outputs_on_panels(solution: Any, names: Sequence[str]) -> tuple[dict, list]:
    """The outputs that are a function's value at a point (``theta(L)``), by function and
    ``{output: (point, value)}``; the others as ``[(output, value)]``."""
    import re

    marked: dict[str, dict] = {}
    listed: list = []
    outputs = solution.outputs if solution.success else {}
    for output, value in outputs.items():
        text = solution.prepared.outputs.get(output, "")
        found = re.fullmatch(r"\s*([A-Za-z_]\w*)\s*\((.+)\)\s*", text)
        if found and found.group(1) in names:
            try:
                point = float(solution.evaluate(found.group(2)))
            except (ValueError, ArithmeticError, TypeError):
                point = math.nan
            if math.isfinite(point):
                marked.setdefault(found.group(1), {})[output] = (point, float(value))
                continue
        listed.append((output, float(value)))
    return marked, listed


#: A figure's line of the constants held while one is traced names at most this many.
HELD_SHOWN = 4


def _held(title: str, prepared: Any, moving: Sequence[str], units: Mapping[str, str]) -> str:
    """``title`` and a line naming the constants held fixed while ``moving`` change (a spec's
    title may describe a map in two constants, and this figure is one cut of it at Bi = 1)."""
    held = [(name, value) for name, value in (getattr(prepared, "constants", {}) or {}).items() if name not in moving]
    if not held:
        return title
    shown = ", ".join(f"{name} = {value:g}{_unit(name, units)}" for name, value in held[:HELD_SHOWN])
    more = f" and {len(held) - HELD_SHOWN} more" if len(held) > HELD_SHOWN else ""
    return f"{title}\n" + f"({', '.join(moving)} varied; {shown}{more})" if title else f"{shown}{more}"


def default_title(prepared: Any) -> str:
    """A title for a figure of a problem that has none of its own: its equations, as written."""
    if prepared is None:
        return ""
    arguments = getattr(prepared, "facts", {}).get("arguments", {}) or {}
    equations = arguments.get("equations") or []
    if isinstance(equations, str):
        equations = [equations]
    return ", ".join(str(e) for e in equations)


def _geometric_range(values: np.ndarray) -> bool:
    """Positive values over more than two decades: a logarithmic axis."""
    return bool(values.size > 1 and values.min() > 0 and values.max() / values.min() > 100)


def _log_axis(axis, values: np.ndarray) -> None:  # noqa: ANN001 - a matplotlib Axis
    """A logarithmic axis labelled in plain numbers (0.1, 1, 10, not powers of ten where plain
    numbers read better), with 2 and 5 marked between decades when it spans few of them."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    axis.axes.set_xscale("log") if axis is axis.axes.xaxis else axis.axes.set_yscale("log")
    low, high = float(values.min()), float(values.max())
    if high / low <= 1e3:
        axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        axis.set_minor_formatter(NullFormatter())
    if 1e-4 <= low and high <= 1e5:
        axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))


def _unit(name: str, units: Mapping[str, str]) -> str:
    return f" {units[name]}" if name in units else ""


def _number(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _geometric(values: Any) -> bool:
    """Whether grid values are in constant ratio (a logarithmic axis shows them evenly)."""
    v = np.asarray(values, float)
    if v.size < 3 or np.any(v <= 0):
        return False
    ratios = v[1:] / v[:-1]
    return bool(np.allclose(ratios, ratios[0], rtol=1e-6) and not np.isclose(ratios[0], 1.0))


def fit_figure(result: Any, path: str | Path, *, title: str | None = None,
               units: Mapping[str, str] | None = None) -> Any:
    """Draw a fit (:func:`bvpkit.fit`): per data set of a function of the independent variable,
    the measurements with error bars (one sigma) and the fitted curve, and below it the
    residuals (data less model, in sigmas); point outputs are listed in the legend.

    Returns the matplotlib figure."""
    solution = result.solution
    curves = [(text, given) for text, given in result.data.items() if given[0] is not None]
    points = [(text, given) for text, given in result.data.items() if given[0] is None]
    if not curves:
        raise OptionError("a fit's figure draws data against the independent variable; this fit has none")
    title, units, independent = _title_and_units(solution, title, units)
    fig, axes = _figure(2 * len(curves))
    a, b = solution.interpolant.ends
    fine = np.linspace(a, b, PROFILE_SAMPLES)
    shown = ", ".join(f"{n} = {result.values[n]:.5g}" + (f" +/- {result.errors[n]:.2g}" if np.isfinite(result.errors[n])
                                                         else "") for n in result.names)
    for i, (text, (x, y, sigma)) in enumerate(curves):
        ax, below = axes[2 * i], axes[2 * i + 1]
        ax.errorbar(x, y, yerr=sigma, fmt="o", ms=4, color="0.2", capsize=2.5, label="measured", zorder=4)
        ax.plot(fine, np.asarray(solution.evaluate(text, at=fine), float), "-", color="tab:blue", lw=1.8,
                label=f"fitted: {shown}", zorder=3)
        for name, (_, value, s) in points if i == 0 else []:
            ax.plot([], [], ls="none", label=f"{name}: measured {float(value[0]):.5g} +/- {float(s[0]):.2g}")
        ax.set_ylabel(label(text, units, independent))
        ax.legend(loc="best", fontsize=8.5, framealpha=0.9)
        residual = -np.asarray(result.residuals[text], float) / sigma
        below.axhline(0.0, color="0.45", lw=1.0)
        below.plot(x, residual, "o", ms=4, color="tab:red")
        below.set_ylabel("residual / sigma")
    axes[-1].set_xlabel(label(independent, units, independent) if independent else "")
    _finish(fig, axes, title, path)
    return fig
