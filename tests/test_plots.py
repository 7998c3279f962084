"""Figures ready for a report: every output on its panel, units in the labels, folds in the
legend, smooth branches, design charts with one curve per slower value and log axes on
geometric grids (bvpkit.solver.plots, reached through Branch.plot and SweepResult.plot)."""

from __future__ import annotations

import types

import numpy as np
import pytest

import bvpkit
from bvpkit.errors import OptionError
from bvpkit.solver import plots

pytest.importorskip("matplotlib")
pytestmark = pytest.mark.extra

SLAB = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 0.1},
                      title="Our stored slab", settings={"units": {"lam": "1", "x": "m", "y": "K"}})
PELLET = bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c'(1) = Bi*(1 - c(1))"], (0, 1),
                        independent="r", constants={"phi": 1.0, "Bi": 10.0},
                        outputs={"effectiveness": "3*c'(1)/phi**2", "surface": "c(1)"})


@pytest.fixture(scope="module")
def branch():
    return bvpkit.trace(SLAB, "lam", start=0.1, stop=5.0, outputs=["y'(0)", "y(1/2)"])


@pytest.fixture(scope="module")
def chart():
    return bvpkit.sweep(PELLET, {"phi": np.geomspace(0.1, 100, 12), "Bi": [1.0, 10.0, 100.0]},
                        outputs=["effectiveness", "surface"], executor="serial")


def _legend(ax) -> list[str]:  # noqa: ANN001
    legend = ax.get_legend()
    return [t.get_text() for t in legend.get_texts()] if legend is not None else []


def test_a_branch_figure_has_a_panel_per_output_units_a_title_and_its_fold_in_the_legend(branch, tmp_path):
    path = tmp_path / "branch.png"
    fig = branch.plot(path)
    assert path.stat().st_size > 10_000
    axes = fig.axes
    assert [ax.get_ylabel() for ax in axes] == ["y'(0) [K/m]", "y(1/2) [K]"]
    assert axes[-1].get_xlabel() == "lam [1]"
    assert fig._suptitle.get_text() == "Our stored slab"
    # analytic: the fold of y'' + lam e^y = 0, y(0) = y(1) = 0 lies at lam_c = max over t of
    # t^2 / (2 cosh^2(t/4)) = 3.5138307191... (the closed-form solution of the Bratu problem)
    from scipy.optimize import minimize_scalar

    found = minimize_scalar(lambda t: -t**2 / (2 * np.cosh(t / 4) ** 2), bounds=(1, 10), method="bounded")
    lam_c = -found.fun
    (fold,) = [t for t in _legend(axes[0]) if t.startswith("fold")]
    assert fold == f"fold at lam = {lam_c:.6g}" == "fold at lam = 3.51383"
    # the fold is drawn where it was located, on every panel
    for ax, name in zip(axes, ["y'(0)", "y(1/2)"]):
        marks = [line for line in ax.get_lines() if line.get_marker() == "o"]
        assert marks and np.isclose(marks[0].get_xdata()[0], branch.folds[0].parameter)
        assert np.isclose(marks[0].get_ydata()[0], branch.folds[0].outputs[name])


def test_a_branch_with_few_points_is_drawn_as_a_smooth_curve_through_them(branch, tmp_path):
    few = branch  # two dozen points around a fold
    fig = few.plot(tmp_path / "few.svg", "y'(0)")
    curve = max(fig.axes[0].get_lines(), key=lambda line: len(line.get_xdata()))
    x, y = np.asarray(curve.get_xdata()), np.asarray(curve.get_ydata())
    assert x.size >= 10 * few.parameter.size  # not a polygon through the points
    # it passes through every computed point ...
    for p, v in zip(few.parameter, few.outputs["y'(0)"]):
        assert np.min(np.hypot((x - p) / np.ptp(x), (y - v) / np.ptp(y))) < 1e-9
    # ... turns at the fold and never goes past it by more than a sliver (monotone cubic)
    assert x.max() <= few.folds[0].parameter * (1 + 1e-3)


def test_stability_is_drawn_apart_and_branch_points_are_listed(branch, tmp_path):
    marked = types.SimpleNamespace(
        name=branch.name, parameter=branch.parameter, outputs=branch.outputs, solutions=branch.solutions,
        folds=branch.folds,
        stability=[i < branch.folds[0].index for i in range(branch.parameter.size)],
        branch_points=[types.SimpleNamespace(parameter=2.0, outputs={"y'(0)": 1.3, "y(1/2)": 0.4},
                                             error=0.0)],
    )
    fig = plots.branch_figure(marked, tmp_path / "marked.png")
    legend = _legend(fig.axes[0])
    assert {"stable", "unstable", "branch point at lam = 2"} <= set(legend)
    styles = {line.get_label(): line.get_linestyle() for line in fig.axes[0].get_lines()}
    assert styles["stable"] != styles["unstable"]


def test_no_legend_where_there_is_nothing_to_tell(tmp_path):
    straight = bvpkit.trace(PELLET.with_constants(Bi=10.0), "phi", start=0.5, stop=3.0,
                            outputs=["effectiveness"])
    assert not straight.folds
    fig = straight.plot(tmp_path / "plain.png")
    assert fig.axes[0].get_legend() is None


def test_a_design_chart_has_a_curve_per_slower_value_log_axes_and_a_panel_per_output(chart, tmp_path):
    path = tmp_path / "chart.pdf"
    fig = chart.plot(path, units={"phi": "1"}, title="Our pellets")
    assert path.read_bytes()[:4] == b"%PDF"
    top, bottom = fig.axes
    assert top.get_xscale() == "log"  # the modulus grid is geometric
    assert top.get_yscale() == "log"  # the effectiveness spans more than LOG_SPAN
    assert bottom.get_xlabel() == "phi [1]"
    assert [top.get_ylabel(), bottom.get_ylabel()] == ["effectiveness", "surface"]
    assert _legend(top) == ["Bi = 1", "Bi = 10", "Bi = 100"]
    assert len([line for line in bottom.get_lines() if len(line.get_xdata()) == 12]) == 3
    assert fig._suptitle.get_text() == "Our pellets"


def test_a_linear_grid_keeps_linear_axes_and_one_curve_has_no_legend(tmp_path):
    result = bvpkit.sweep(PELLET, {"phi": [0.5, 1.0, 1.5, 2.0, 2.5]}, outputs=["effectiveness"],
                          executor="serial")
    fig = result.plot(tmp_path / "one.png")
    assert fig.axes[0].get_xscale() == "linear" and fig.axes[0].get_legend() is None


def test_asking_for_an_output_the_result_lacks_names_what_it_has(branch, chart, tmp_path):
    with pytest.raises(OptionError, match=r"'y\(1\)' is not an output of this branch "
                                          r"\(it records: y'\(0\), y\(1/2\)\)"):
        branch.plot(tmp_path / "x.png", "y(1)")
    with pytest.raises(OptionError, match="'eta' is not an output of this sweep"):
        chart.plot(tmp_path / "x.png", "eta")


def test_cli_plots_carry_the_spec_title_and_units(tmp_path, monkeypatch, capsys):
    from bvpkit.io import cli

    spec = tmp_path / "fin.toml"
    spec.write_text("""
title = "Our test fin"
[problem]
domain = [0, "L"]
equations = ["theta'' = m2*theta"]
conditions = ["theta(0) = 40", "theta'(L) = 0"]
constants = { m2 = 400.0, L = 0.05 }
[outputs]
tip = "theta(L)"
[units]
m2 = "1/m^2"
tip = "K"
[trace]
parameter = "m2"
start = 100.0
stop = 900.0
[sweep.grid]
m2 = { from = 100.0, to = 900.0, count = 5 }
L = [0.03, 0.05]
""")
    monkeypatch.chdir(tmp_path)
    drawn = []
    real = plots.branch_figure, plots.sweep_figure

    def spy(kind):  # noqa: ANN001, ANN202
        def draw(*args, **kwargs):  # noqa: ANN002, ANN003, ANN202
            fig = real[kind](*args, **kwargs)
            drawn.append(fig)
            return fig
        return draw

    monkeypatch.setattr(plots, "branch_figure", spy(0))
    monkeypatch.setattr(plots, "sweep_figure", spy(1))
    assert cli.main(["trace", str(spec), "--plot", "t.png", "--quiet", "--csv", "t.csv"]) == 0
    assert cli.main(["sweep", str(spec), "--plot", "s.png", "--serial", "--quiet", "--csv", "s.csv"]) == 0
    out = capsys.readouterr().out
    assert "units: m2 in 1/m^2, tip in K" in out
    assert "m2 [1/m^2]" in out  # the sweep table's header
    trace_fig, sweep_fig = drawn
    assert sweep_fig._suptitle.get_text() == "Our test fin"
    # the trace is one cut of the problem: its title says at which value of the other constant
    assert trace_fig._suptitle.get_text() == "Our test fin\n(m2 varied; L = 0.05)"
    assert trace_fig.axes[0].get_ylabel() == "tip [K]" and sweep_fig.axes[0].get_xlabel() == "m2 [1/m^2]"
    assert (tmp_path / "t.csv").read_text().splitlines()[0] == "m2 [1/m^2],tip [K],error_estimate,step"
    assert (tmp_path / "s.csv").read_text().splitlines()[0].startswith("m2 [1/m^2],L,tip [K],success")


def test_the_formats_a_plot_name_is_judged_by_without_matplotlib_are_ones_it_writes():
    # the command line's fallback list (used when the plot extra is missing) never accepts a
    # name that matplotlib would then refuse
    from matplotlib.backend_bases import FigureCanvasBase

    from bvpkit.io.cli import PICTURE_FORMATS

    assert set(PICTURE_FORMATS) <= set(FigureCanvasBase.get_supported_filetypes())
    assert "png" in PICTURE_FORMATS and "pdf" in PICTURE_FORMATS and "svg" in PICTURE_FORMATS


def test_a_fit_is_drawn_with_its_data_curve_and_residuals(tmp_path):
    x = np.linspace(0.1, 1.0, 8)
    y = np.cosh(2.0 * (1 - x)) / np.cosh(2.0)  # analytic fin profile, m = 2, no noise
    fin = bvpkit.Problem(["theta'' = m**2*theta"], ["theta(0) = 1", "theta'(1) = 0"], (0, 1), constants={"m": 1.5},
                         settings={"units": {"x": "m", "theta": "K"}})
    result = bvpkit.fit(fin, {"theta": (x, y), "-theta'(0)": (2.0 * np.tanh(2.0), 0.01)}, vary={"m": 1.5},
                        sigma={"theta": 0.01, "-theta'(0)": 0.01})
    fig = plots.fit_figure(result, tmp_path / "fit.png")
    top, below = fig.axes
    assert (tmp_path / "fit.png").stat().st_size > 0
    assert top.get_ylabel() == "theta [K]" and below.get_ylabel() == "residual / sigma"
    labels = _legend(top)
    assert any(t.startswith("fitted: m = 2") for t in labels) and any("-theta'(0)" in t for t in labels)
