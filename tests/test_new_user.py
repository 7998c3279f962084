"""A new user's second walk through bvpkit: a length written once as a number and once as a
name, requested points in traces, a trace that reaches its point budget, free ends from rough
starts, powers of the independent variable written as decimals, a failed solve's parameters,
a picture of one solution, error estimates in tables, what `check` refuses, tables handed to
pandas and xarray."""

from __future__ import annotations

import numpy as np
import pytest

import bvpkit
from bvpkit.errors import ProblemError

# -- a length written once as a number and once as a name --------------------------------------
BEAM = dict(constants={"L": 4.0, "EI": 2.1e3, "q": 750.0})


def test_a_condition_at_a_named_end_of_a_numeric_domain_is_a_condition_at_that_end():
    p = bvpkit.Problem(["EI*w'''' = q"], ["w(0) = 0", "w''(0) = 0", "w(L) = 0", "w''(L) = 0"], (0, 4.0), **BEAM)
    sol = bvpkit.solve(p, tol=1e-10)
    assert sol.success, sol.message
    # analytic (Euler-Bernoulli, simply supported, uniform load q in the direction of w):
    # w(L/2) = 5 q L^4 / (384 EI)
    assert sol.evaluate("w(2)") == pytest.approx(5 * 750.0 * 4.0**4 / (384 * 2.1e3), abs=1e-7)
    # the end took the name: a change of L moves it with the conditions written there
    longer = bvpkit.solve(p.with_constants(L=5.0), tol=1e-10)
    assert longer.evaluate("w(L/2)") == pytest.approx(5 * 750.0 * 5.0**4 / (384 * 2.1e3), abs=1e-7)


def test_a_number_in_a_condition_beside_a_named_end_is_still_refused_with_the_way_out():
    # the number would not follow the name when L changes: refused, saying to write the end itself
    with pytest.raises(ProblemError, match=r"lies on an end of the domain \[0, L\] = \[0, 4\]: write a condition "
                                           r"there at the end itself \(L\)"):
        bvpkit.Problem(["EI*w'''' = q"], ["w(0) = 0", "w''(0) = 0", "w(4) = 0", "w''(L) = 0"], (0, "L"), **BEAM)


# -- requested points in a trace --------------------------------------------------------------
def _drawn_gaps(branch, output):
    """Distances between consecutive points of the drawing, each axis scaled to its spread."""
    x, y = branch.parameter, branch.outputs[output]
    return np.hypot(np.diff(x) / np.ptp(x), np.diff(y) / np.ptp(y))


def test_a_requested_value_gives_one_row_per_crossing_and_no_near_duplicates():
    wedge = bvpkit.Problem(["f''' + f*f'' + beta*(1 - f'**2) = 0"], ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"],
                           (0, "inf"), independent="eta", constants={"beta": 0.0})
    b = bvpkit.trace(wedge, "beta", start=0.0, stop=-0.3, outputs=["f''(0)"], at=[-0.12], return_to=-0.02)
    assert b.success, b.message
    assert _drawn_gaps(b, "f''(0)").min() > 1e-6
    # the branch passes beta = -0.12 twice (once on each side of the separation fold)
    assert b.steps.count("requested") == 2 and len(b.requested[-0.12]) == 2
    lower = min(s.evaluate("f''(0)") for s in b.requested[-0.12])
    assert lower == pytest.approx(-0.1429351944, abs=1e-5)  # Belden et al. 2019 (lower branch at -0.12)


def test_thinning_keeps_the_requested_point_of_a_near_duplicate_pair():
    from bvpkit.families.continuation import Branch, Fold

    b = Branch("lam", {"y(0)": "y(0)"})
    marks = [object() for _ in range(5)]
    for value, out, how, mark in zip([0.0, 0.5, 0.5 + 1e-12, 1.0, 1.5], [0.0, 1.0, 1.0, 1.5, 1.0],
                                     ["natural", "arclength", "requested", "arclength", "arclength"], marks):
        b._add(value, mark, how, np.array([out]))
    b.requested[0.5] = [marks[2]]
    b.folds.append(Fold(parameter=1.2, outputs={}, error=0.0, index=4, solution=None))
    b._thin()
    assert b.steps == ["natural", "requested", "arclength", "arclength"]
    assert b.solutions[1] is marks[2] and b.requested[0.5] == [marks[2]]
    assert b.folds[0].index == 3  # still between the points at 1.0 and 1.5


# -- a trace that spends its budget of points --------------------------------------------------
def test_a_trace_stopped_by_its_budget_of_points_says_so_with_a_status_and_exit_code_of_its_own(capsys):
    import json
    from pathlib import Path

    from bvpkit.io.cli import main
    from bvpkit.status import Status

    spec = Path(__file__).resolve().parent.parent / "specs/reacting_slab_ignition.toml"
    code = main(["trace", str(spec), "--max-points", "10", "--json", "--tol", "1e-6"])
    data = json.loads(capsys.readouterr().out)
    assert data["status"] == "point_limit" and not data["success"]
    assert code == Status.POINT_LIMIT.exit_code and code != Status.NOT_CONVERGED.exit_code
    # how many points and where it stopped, once each and in agreement
    last = data["parameter"][-1]
    assert "budget of max_points = 10 points" in data["message"] and len(data["parameter"]) >= 10
    assert f"lam = {last:.6g}" in data["message"] and "not_converged" not in data["message"]
    assert Status.POINT_LIMIT.word in Path(spec.parent.parent / "docs/failures.md").read_text()


def test_a_fold_curve_stopped_by_its_budget_says_where():
    slab = bvpkit.Problem(["y'' + d*exp(y) = 0"], ["y'(0) = 0", "y'(1) + Bi*y(1) = 0"], (0, 1),
                          constants={"d": 0.1, "Bi": 1.0})
    curve = bvpkit.fold_curve(slab, "d", along="Bi", start=0.5, stop=100.0, max_points=3)
    assert curve.status is bvpkit.Status.POINT_LIMIT and curve.as_dict()["status"] == "point_limit"
    assert "budget of max_points = 3 points" in curve.message and "stopped at Bi = " in curve.message


# -- free ends from rough starts ----------------------------------------------------------------
# the first zero of the Lane-Emden function of index n (Boyd 2011, Table 1)
FIRST_ZERO = {1.5: 3.65375373621912608, 3: 6.896848619376960}


def _polytrope(n, start):
    return bvpkit.Problem([f"u'' + 2/z*u' + u**{n} = 0"], ["u(0) = 1", "u'(0) = 0", "u(s) = 0"], (0, "s"),
                          independent="z", unknown_parameters={"s": start})


@pytest.mark.parametrize("n", [1.5, 3])
def test_the_first_zero_of_a_polytrope_from_every_rough_start(n):
    zero = FIRST_ZERO[n]
    for fraction in (0.6, 0.7, 0.8, 0.9, 1.0, 1.1, 1.2, 1.3):
        sol = bvpkit.solve(_polytrope(n, fraction * zero), tol=1e-10)
        assert sol.success, f"start {fraction} x: {sol.message}"
        assert sol.parameters["s"] == pytest.approx(zero, abs=1e-8), f"start {fraction} x"


def test_a_free_end_that_lands_on_a_later_zero_says_the_first_is_there():
    # from a start near the second zero the solve ends there; the first zero (Boyd 2011) is named
    sol = bvpkit.solve(_polytrope(3, 36.5), tol=1e-8)
    assert sol.success and sol.parameters["s"] > 30
    assert "u(s) = 0 is also met inside the domain, near z = 6.89" in sol.message
    assert "another solution" in sol.message
    # the same problem written on [0, 1] (s stretching the equation): the note, conditionally
    fixed = bvpkit.Problem(["u'' + 2/t*u' + s**2*u**3 = 0"], ["u(0) = 1", "u'(0) = 0", "u(1) = 0"], (0, 1),
                           independent="t", unknown_parameters={"s": 6.9})
    again = bvpkit.solve(fixed, tol=1e-8)
    if again.success and again.parameters["s"] > 30:
        # analytic (scaling): the first zero sits at t = 6.8968 / s
        import re

        near = float(re.search(r"near t = ([0-9.]+)", again.message).group(1))
        assert near == pytest.approx(FIRST_ZERO[3] / again.parameters["s"], abs=1e-3)
    elif again.success:
        assert again.parameters["s"] == pytest.approx(FIRST_ZERO[3], abs=1e-6)
    # a solution at the first zero carries no such note
    first = bvpkit.solve(_polytrope(3, 6.0), tol=1e-8)
    assert first.success and "also met inside" not in first.message


# -- decimal powers of the independent variable --------------------------------------------------
def test_thomas_fermi_with_decimal_powers_is_the_problem_with_fractions():
    fractions = bvpkit.Problem(["y'' = y**(3/2)/sqrt(x)"], ["y(0) = 1", "y(inf) = 0"], (0, "inf"))
    decimals = bvpkit.Problem(["y'' = y**1.5/x**0.5"], ["y(0) = 1", "y(inf) = 0"], (0, "inf"))
    # one canonical form: the same standard form, the same generated code
    assert bvpkit.prepare(decimals).layout.key == bvpkit.prepare(fractions).layout.key
    sol = bvpkit.solve(decimals, tol=1e-8)
    assert sol.success, sol.message
    # y'(0) = -1.588071022611375 (Amore, Boyd and Fernandez 2012)
    assert sol.evaluate("y'(0)") == pytest.approx(-1.588071022611375, abs=1e-6)


@pytest.mark.parametrize("equation", ["y'' = y/x**1.5", "y'' = 1/x**1.5", "y'' = y/(x - a)**3", "y'' = y/r**3"])
def test_a_singularity_bvpkit_cannot_treat_is_refused_in_the_users_names(equation):
    name = "r" if "r" in equation else "x"
    with pytest.raises(ProblemError) as refused:
        bvpkit.Problem([equation], [f"y({'a' if 'a' in equation else 0}) = 1", "y(1) = 0"],
                       ("a" if "a" in equation else 0, 1), independent=name, constants={"a": 0.5})
    said = str(refused.value)
    assert "_" not in said.replace("y_", ""), said  # no internal symbol (_s0, _xphys, _k0)
    assert f"S y/{'(x - a)' if 'a' in equation else name}" in said.replace("xi", name)


# -- a failed solve's parameters ------------------------------------------------------------------
def test_a_failed_solve_gives_no_parameter_values_unless_asked():
    # y = sin on a free end: sin(s) = 5 has no solution, so the solve fails (analytic: |sin| <= 1)
    p = bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y'(0) = 1", "y(s) = 5"], (0, "s"), unknown_parameters={"s": 1.0})
    sol = bvpkit.solve(p, time_limit=4)
    assert not sol.success
    assert sol.parameters == {} and sol.parameter_errors == {}
    assert sol.as_dict()["parameters"] == {"s": None}
    with pytest.raises(bvpkit.BvpkitError, match=r"parameter_values\(\): this solve failed .*allow_failed=True"):
        sol.parameter_values()
    assert set(sol.parameter_values(allow_failed=True)) == {"s"}
    # a solved one gives them both ways (analytic: sin(s) = 1/2 at s = pi/6)
    good = bvpkit.solve(bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y'(0) = 1", "y(s) = 1/2"], (0, "s"),
                                       unknown_parameters={"s": 1.0}), tol=1e-10)
    assert good.parameters["s"] == pytest.approx(np.pi / 6, abs=1e-9) == good.parameter_values()["s"]


# -- `bvpkit check` refuses what `solve` refuses --------------------------------------------------
CHECKED = """
[problem]
domain = [0, 1]
equations = ["y'' = -y"]
conditions = ["y(0) = 0", "y(1) = 1"]
[solver]
method = "{method}"
[outputs]
far = "{far}"
"""


@pytest.mark.parametrize("command", ["check", "solve"])
@pytest.mark.parametrize("method, far, said", [
    ("shootin", "y(1/2)", "unknown method 'shootin' (did you mean 'single_shooting'?)"),
    ("auto", "y(2)", "[outputs] output 'far' (y(2)): the point x = 2 lies outside the domain [0, 1]"),
])
def test_check_refuses_what_solve_refuses_naming_it(command, method, far, said, tmp_path, capsys):
    from bvpkit.io.cli import main

    spec = tmp_path / "s.toml"
    spec.write_text(CHECKED.format(method=method, far=far))
    assert main([command, str(spec)]) == bvpkit.Status.BAD_INPUT.exit_code
    err = capsys.readouterr().err
    assert said in err and err.count("\n") == 1


def test_an_output_a_changed_constant_leaves_outside_is_named():
    p = bvpkit.Problem(["y'' = -y"], ["y(0) = 0", "y(L) = 1"], (0, "L"), constants={"L": 1.0},
                       outputs={"inner": "y(0.9)"})
    with pytest.raises(bvpkit.BvpkitError, match=r"output 'inner' \(y\(0.9\)\): x = 0.9 is outside"):
        bvpkit.solve(p.with_constants(L=0.5))


# -- a picture of one solution ---------------------------------------------------------------------
@pytest.mark.extra
def test_solve_draws_the_profile_with_its_outputs_marked(tmp_path, capsys):
    pytest.importorskip("matplotlib")
    from pathlib import Path

    from bvpkit.io.cli import main

    spec = Path(__file__).resolve().parent.parent / "specs/pin_fin.toml"
    picture = tmp_path / "fin.png"
    assert main(["solve", str(spec), "--plot", str(picture)]) == 0
    assert picture.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and "plot written to" in capsys.readouterr().out
    sol = bvpkit.solve(bvpkit.load(spec))
    fig = sol.plot(tmp_path / "again.svg")
    (ax,) = fig.axes
    assert ax.get_ylabel() == "theta [K]" and ax.get_xlabel() == "x [m]"
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    # theta(L) is a point of the curve: marked there; the others are listed
    assert any(t.startswith("tip_excess_temperature_K = ") for t in legend)
    assert any(t.startswith("heat_rate_W = ") and t.endswith(" W") for t in legend)
    marker = [line for line in ax.get_lines() if line.get_marker() == "o"][0]
    assert marker.get_xdata()[0] == pytest.approx(0.08) and marker.get_ydata()[0] == pytest.approx(
        sol.outputs["tip_excess_temperature_K"])
    assert "pin fin" in fig._suptitle.get_text()  # the spec's title


@pytest.mark.extra
def test_a_figure_without_a_title_of_its_own_gets_the_equations_and_a_failed_solve_is_not_drawn(tmp_path):
    pytest.importorskip("matplotlib")
    sol = bvpkit.solve(bvpkit.Problem(["y'' = -y"], ["y(0) = 0", "y(1) = 1"], (0, 1)))
    fig = sol.plot(tmp_path / "y.png")
    assert fig._suptitle.get_text() == "y'' = -y"
    failed = bvpkit.solve(bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y'(0) = 1", "y(s) = 5"], (0, "s"),
                                         unknown_parameters={"s": 1.0}), time_limit=2)
    with pytest.raises(bvpkit.BvpkitError, match=r"plot\(\): this solve failed"):
        failed.plot(tmp_path / "no.png")
    drawn = failed.plot(tmp_path / "marked.png", allow_failed=True)
    assert any("FAILED" in t.get_text() for t in drawn.texts)


@pytest.mark.extra
def test_a_traced_figure_says_which_constants_were_held_and_has_a_title_without_a_spec(tmp_path):
    pytest.importorskip("matplotlib")
    slab = bvpkit.Problem(["y'' + d*exp(y) = 0"], ["y'(0) = 0", "y'(1) + Bi*y(1) = 0"], (0, 1),
                          constants={"d": 0.1, "Bi": 1.0})
    branch = bvpkit.trace(slab, "d", start=0.1, stop=0.2, outputs=["y(0)"])
    title = branch.plot(tmp_path / "b.png")._suptitle.get_text()
    assert title.startswith("y'' + d*exp(y) = 0") and "(d varied; Bi = 1)" in title


# -- error estimates in every table ------------------------------------------------------------------
def test_trace_and_fold_curve_tables_carry_each_points_error_estimate(tmp_path, capsys):
    import csv
    from pathlib import Path

    from bvpkit.io.cli import main

    spec = Path(__file__).resolve().parent.parent / "specs/reacting_slab_ignition.toml"
    out = tmp_path / "b.csv"
    assert main(["trace", str(spec), "--csv", str(out), "--quiet", "--stop", "1.0", "--tol", "1e-6"]) == 0
    rows = list(csv.DictReader(out.read_text().splitlines()))
    assert rows and "error_estimate" in rows[0]
    errors = [float(r["error_estimate"]) for r in rows]
    assert all(0 <= e <= 1e-6 for e in errors)  # each point met the tolerance asked
    header = [line for line in capsys.readouterr().out.splitlines() if line.split()[:1] == ["lam"]]
    assert header and "error" in header[0].split()  # the summary's column
    slab = bvpkit.Problem(["y'' + d*exp(y) = 0"], ["y'(0) = 0", "y'(1) + Bi*y(1) = 0"], (0, 1),
                          constants={"d": 0.1, "Bi": 1.0})
    curve = bvpkit.fold_curve(slab, "d", along="Bi", start=1.0, stop=2.0, outputs=["y(0)"], tol=1e-6)
    table = curve.table()
    assert list(table)[-1] == "error_estimate" and len(table["error_estimate"]) == len(curve.along)
    assert np.all(np.asarray(table["error_estimate"]) < 1e-4)


# -- tables handed to pandas and xarray ---------------------------------------------------------------
PELLET = bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c'(1) = Bi*(1 - c(1))"], (0, 1),
                        independent="r", constants={"phi": 1.0, "Bi": 10.0})


@pytest.mark.extra
def test_every_table_goes_to_pandas_and_a_sweep_to_an_xarray_grid():
    pytest.importorskip("pandas")
    pytest.importorskip("xarray")
    result = bvpkit.sweep(PELLET, {"phi": [0.5, 1.0, 2.0], "Bi": [1.0, 10.0]}, outputs={"eta": "3*c'(1)/phi**2"},
                          workers=1, tol=1e-8)
    grid = result.to_xarray()
    assert dict(grid.sizes) == {"phi": 3, "Bi": 2}
    assert {"eta", "status", "success", "error_estimate"} <= set(grid.data_vars)  # the output's own label
    for row in result.table:
        here = grid.sel(phi=row["phi"], Bi=row["Bi"])
        assert float(here["eta"]) == row["eta"] and str(here["status"].values) == row["status"]
    # analytic: the effectiveness of a sphere with external resistance,
    # 3/phi^2 * (phi coth(phi) - 1) / (1 + (phi coth(phi) - 1)/Bi)
    phi, bi = 2.0, 10.0
    inner = phi / np.tanh(phi) - 1
    assert float(grid["eta"].sel(phi=phi, Bi=bi)) == pytest.approx(3 / phi**2 * inner / (1 + inner / bi),
                                                                               rel=1e-6)
    frame = result.to_pandas()
    assert len(frame) == 6 and list(frame.columns)[:3] == ["phi", "Bi", "eta"]
    sol = bvpkit.solve(PELLET)
    assert list(sol.to_pandas().columns) == ["r", "c", "c'"]
    branch = bvpkit.trace(PELLET, "phi", start=1.0, stop=1.5, outputs={"centre": "c(0)"})
    assert list(branch.to_pandas().columns) == ["phi", "centre", "error_estimate", "step"]


def test_a_missing_table_library_names_the_extra(monkeypatch):
    import sys

    monkeypatch.setitem(sys.modules, "pandas", None)  # as if not installed
    sol = bvpkit.solve(bvpkit.Problem(["y'' = -y"], ["y(0) = 0", "y(1) = 1"], (0, 1)))
    with pytest.raises(bvpkit.errors.MissingExtraError, match=r'to_pandas\(\) needs pandas: pip install "\.\[tables\]"'):
        sol.to_pandas()


# -- stability at a singular centre --------------------------------------------------------------------
@pytest.mark.parametrize("power, first", [
    (2, np.pi**2),  # analytic: sphere, v = sin(pi r)/r, mu_1 = -pi^2
    (1, 2.404825557695773**2),  # analytic: cylinder, v = J0(j r), j the first zero of J0 (scipy.special.jn_zeros)
])
def test_the_principal_eigenvalue_of_diffusion_in_a_sphere_and_a_cylinder(power, first):
    from bvpkit.families.stability import principal_eigenvalue

    p = bvpkit.Problem([f"y'' + ({power}/r)*y' + d*exp(y) = 0"], ["y'(0) = 0", "y(1) = 0"], (0, 1), independent="r",
                       constants={"d": 1e-9})
    sol = bvpkit.solve(p, tol=1e-8)
    assert principal_eigenvalue(sol) == pytest.approx(-first, rel=1e-6)


def test_a_sphere_that_ignites_is_stable_below_its_fold_and_unstable_above():
    p = bvpkit.Problem(["y'' + (2/r)*y' + d*exp(y) = 0"], ["y'(0) = 0", "y(1) = 0"], (0, 1), independent="r",
                       constants={"d": 3.0})
    b = bvpkit.trace(p, "d", start=3.0, stop=4.0, outputs=["y(0)"], stability=True, return_to=3.2)
    assert b.success and len(b.folds) == 1
    # the critical value of a sphere, 3.32 (Frank-Kamenetskii's delta_cr for a sphere, from memory)
    assert b.folds[0].parameter == pytest.approx(3.32, abs=0.005)
    before, after = b.stability[: b.folds[0].index], b.stability[b.folds[0].index:]
    assert all(s is True for s in before[:-1]) and all(s is False for s in after[1:])


# -- one name for the branch switch ------------------------------------------------------------------------
def test_the_branch_switch_has_one_name_everywhere_and_the_old_ones_still_work():
    from bvpkit.io.cli import _parser

    for flag in ("--no-branch-switching", "--no-switch"):
        assert _parser().parse_args(["trace", "s.toml", flag]).no_switch is True
    bratu = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 0.1})
    with pytest.raises(bvpkit.OptionError, match="give branch_switching only"):
        bvpkit.trace(bratu, "lam", start=0.1, stop=0.2, switch=False, branch_switching=False)
    with pytest.raises(bvpkit.OptionError, match="branch_switching must be true or false"):
        bvpkit.trace(bratu, "lam", start=0.1, stop=0.2, branch_switching="no")
    old = bvpkit.trace(bratu, "lam", start=0.1, stop=0.3, outputs=["y'(0)"], switch=False)
    new = bvpkit.trace(bratu, "lam", start=0.1, stop=0.3, outputs=["y'(0)"], branch_switching=False)
    assert np.array_equal(old.parameter, new.parameter)


def test_set_on_an_unknown_parameter_says_where_its_start_is_given(capsys):
    from pathlib import Path

    from bvpkit.io.cli import main

    spec = Path(__file__).resolve().parent.parent / "specs/fin_length_for_tip.toml"
    assert main(["solve", str(spec), "--set", "L=6"]) == bvpkit.Status.BAD_INPUT.exit_code
    err = capsys.readouterr().err
    assert "'L' is an unknown parameter, not a constant" in err and "unknown_parameters = { L = ... }" in err
