"""Constants fitted to measurements (issue 27, part 2)."""

import math

import numpy as np
import pytest

import bvpkit

M_TRUE, SIGMA = 2.0, 0.01
X = np.linspace(0.05, 1.0, 20)


def _fin(m=1.0):
    return bvpkit.Problem(["theta'' = m**2*theta"], ["theta(0) = 1", "theta'(L) = 0"], (0, "L"),
                          constants={"m": m, "L": 1.0})


def _profile(x, m, L=1.0):
    # analytic: theta = cosh(m (L - x)) / cosh(m L)
    return np.cosh(m * (L - x)) / np.cosh(m * L)


def _noisy(seed=27):
    rng = np.random.default_rng(seed)
    return _profile(X, M_TRUE) + SIGMA * rng.standard_normal(X.size)


def test_fin_m_from_twenty_noisy_samples():
    result = bvpkit.fit(_fin(), {"theta": (X, _noisy())}, vary={"m": 1.0}, sigma=SIGMA)
    assert result.success and result.status is bvpkit.Status.SOLVED, result.message
    m, se = result.values["m"], result.errors["m"]
    assert abs(m - M_TRUE) < 4 * se
    # linearised standard error sigma / sqrt(sum (d theta/dm)^2), d theta/dm analytic at the true m:
    # d/dm cosh(m(L-x))/cosh(mL) = ((L-x) sinh(m(L-x)) cosh(mL) - L cosh(m(L-x)) sinh(mL)) / cosh(mL)^2
    L = 1.0
    d = ((L - X) * np.sinh(M_TRUE * (L - X)) * np.cosh(M_TRUE * L)
         - L * np.cosh(M_TRUE * (L - X)) * np.sinh(M_TRUE * L)) / np.cosh(M_TRUE * L) ** 2
    linear = SIGMA / math.sqrt(np.sum(d ** 2))
    assert linear / 2 < se < 2 * linear
    assert result.residuals["theta"].shape == (20,)
    assert result.solution.success and result.degrees_of_freedom == 19
    assert result.covariance.shape == (1, 1) and "m = " in result.summary()
    assert result.solution.prepared.constants["m"] == pytest.approx(m)


def test_two_constants_with_a_tip_biot_number():
    def exact(x, m, bi):  # analytic: theta'' = m^2 theta, theta(0) = 1, theta'(1) + Bi theta(1) = 0
        return (np.cosh(m * (1 - x)) + bi / m * np.sinh(m * (1 - x))) / (np.cosh(m) + bi / m * np.sinh(m))

    rng = np.random.default_rng(7)
    y = exact(X, 2.0, 1.0) + SIGMA * rng.standard_normal(X.size)
    fin = bvpkit.Problem(["theta'' = m**2*theta"], ["theta(0) = 1", "theta'(1) + Bi*theta(1) = 0"], (0, 1),
                         constants={"m": 1.5, "Bi": 0.5})
    result = bvpkit.fit(fin, {"theta": (X, y)}, vary={"m": 1.5, "Bi": 0.5}, sigma=SIGMA)
    assert result.success, result.message
    for name, true in (("m", 2.0), ("Bi", 1.0)):
        assert abs(result.values[name] - true) < 4 * result.errors[name]
        assert 0 < result.errors[name] < 1
    assert -1 < result.correlation[0, 1] < 1


def test_a_product_pair_is_not_identifiable():
    fin = bvpkit.Problem(["theta'' = a*b*theta"], ["theta(0) = 1", "theta'(1) = 0"], (0, 1),
                         constants={"a": 2.0, "b": 1.0})
    result = bvpkit.fit(fin, {"theta": (X, _noisy())}, vary={"a": 2.0, "b": 1.5}, sigma=SIGMA)
    assert not result.success and result.status is bvpkit.Status.NOT_IDENTIFIABLE
    assert result.status.word == "not_identifiable"
    assert result.determined == "a*b" and "a*b" in result.message
    assert not any(math.isfinite(e) for e in result.errors.values())
    # what the data do determine is fitted: a*b = m^2
    assert result.values["a"] * result.values["b"] == pytest.approx(M_TRUE ** 2, rel=0.05)


def test_point_outputs_and_several_data_sets():
    fin = _fin(1.5)
    # analytic: -theta'(0) = m tanh(m L) for the fin above
    slope = M_TRUE * math.tanh(M_TRUE)
    result = bvpkit.fit(fin, {"theta": (X, _noisy(), np.full(X.size, SIGMA)), "-theta'(0)": (slope, 0.01)},
                        vary={"m": None}, bounds={"m": (0.1, 10)})
    assert result.success and abs(result.values["m"] - M_TRUE) < 4 * result.errors["m"]
    assert set(result.residuals) == {"theta", "-theta'(0)"}


@pytest.mark.parametrize("kwargs, match", [
    ({"data": {"theta": ([0.5, 2.0], [0.3, 0.1])}}, "outside the domain"),
    ({"data": {"2*m": 3.0}}, "names no unknown"),
    ({"vary": {"h": 1.0}}, "'h', not a constant"),
    ({"sigma": 0.0}, "finite and positive"),
    ({"sigma": math.nan}, "finite and positive"),
    ({"sigma": {"theta": [0.1, -1.0]}}, "finite and positive"),
    ({"data": {"theta": ([0.5], [0.3])}, "vary": {"m": 1.0, "L": 1.0}}, "cannot determine 2 constants"),
])
def test_bad_input_is_refused_before_any_solve(kwargs, match, monkeypatch):
    from bvpkit.solver import driver

    def no_solve(*args, **kw):
        raise AssertionError("a solve ran")

    monkeypatch.setattr(driver, "solve", no_solve)
    args = {"data": {"theta": ([0.25, 0.5], [0.6, 0.4])}, "vary": {"m": 1.0}, "sigma": 0.1} | kwargs
    with pytest.raises(bvpkit.BvpkitError, match=match) as err:
        bvpkit.fit(_fin(), args.pop("data"), **args)
    assert "\n" not in str(err.value)


# -- the command line ---------------------------------------------------------------------------
ROOT = __import__("pathlib").Path(__file__).parents[1]
RIG = ROOT / "specs" / "fin_rig_calibration.toml"


def test_fit_command_on_the_bundled_rig(capsys):
    import json

    from bvpkit.io.cli import main

    assert main(["fit", str(RIG), "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    # the readings were made from the analytic profile with h = 31 W/(m^2 K) plus noise of 0.4 K
    # (made up for the bundled spec; seed 2026)
    assert abs(report["values"]["h"] - 31.0) < 4 * report["errors"]["h"]
    assert 0.1 < report["errors"]["h"] < 1.0 and report["status"] == "solved"
    # h and k enter only as h/k (fin equation and tip condition): not identifiable, exit code of its own
    code = main(["fit", str(RIG), "--vary", "h=20,k=100"])
    out = capsys.readouterr().out
    assert code == bvpkit.Status.NOT_IDENTIFIABLE.exit_code and "h/k" in out and "not determined alone" in out


def test_solve_with_a_sensitivity_table(capsys):
    import json

    from bvpkit.io.cli import main

    assert main(["solve", str(ROOT / "specs" / "pin_fin.toml"), "--sensitivity", "h,L", "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    d = report["sensitivity"]["derivatives"]["tip_excess_temperature_K"]
    # analytic: theta(L) = theta_b / cosh(mL), m^2 = 4h/(kD): d theta(L)/dL = -theta_b m sinh(mL)/cosh(mL)^2
    m = math.sqrt(4 * 40.0 / (200.0 * 0.005))
    assert d["L"] == pytest.approx(-45.0 * m * math.sinh(m * 0.08) / math.cosh(m * 0.08) ** 2, rel=1e-7)
    assert main(["solve", str(ROOT / "specs" / "pin_fin.toml"), "--sensitivity", "hh"]) == 2
    assert "'hh', which is not a constant" in capsys.readouterr().err


@pytest.mark.parametrize("csv_text, args, match", [
    ("x,theta\n0.1,abc\n", [], "is not a number"),
    ("y,theta\n0.1,3\n", [], "first column must be the independent variable 'x'"),
    ("x,theta\n0.1,3\n0.5,2\n", ["--vary", "q=1"], "'q', which is not a constant"),
    ("x,theta\n0.1,3\n0.5,2\n", ["--vary", "h=abc"], "--vary expects NAME=NUMBER"),
    ("x,theta\n", [], "no measurements"),
])
def test_fit_command_refuses_bad_files(tmp_path, capsys, csv_text, args, match):
    from bvpkit.io.cli import main

    data = tmp_path / "readings.csv"
    data.write_text(csv_text)
    assert main(["fit", str(RIG), "--data", str(data), *args]) == 2
    err = capsys.readouterr().err
    assert match in err and err.count("\n") <= 2


def test_a_sigma_column_of_the_file_comes_before_the_specs_figure(tmp_path, capsys):
    import json

    from bvpkit.io.cli import main

    # our own readings of the rig (made up): the spec says sigma = 0.4 for files without a column
    data = tmp_path / "readings.csv"
    data.write_text("x,theta,sigma\n0.01,52,0\n0.03,40,0.4\n0.05,31,0.4\n")
    assert main(["fit", str(RIG), "--data", str(data)]) == 2  # a sigma of 0 in the column is refused
    assert "must be finite and positive" in capsys.readouterr().err
    data.write_text("x,theta,sigma\n0.01,52,0.4\n0.03,40,0.4\n0.05,31,0.4\n")
    assert main(["fit", str(RIG), "--data", str(data), "--json"]) == 0
    same = json.loads(capsys.readouterr().out)["errors"]["h"]
    data.write_text("x,theta,sigma\n0.01,52,0.8\n0.03,40,0.8\n0.05,31,0.8\n")
    assert main(["fit", str(RIG), "--data", str(data), "--json"]) == 0
    doubled = json.loads(capsys.readouterr().out)["errors"]["h"]
    assert doubled == pytest.approx(2 * same, rel=1e-3)  # analytic: standard errors scale with sigma
    assert main(["fit", str(RIG), "--data", str(data), "--sigma", "0.4", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["errors"]["h"] == pytest.approx(same, rel=1e-6)  # the flag replaces it


def test_a_domain_end_fitted_and_the_noise_estimated_without_sigma():
    rng = np.random.default_rng(3)
    x = np.linspace(0.05, 0.9, 15)
    y = _profile(x, 2.0, L=1.2) + 0.005 * rng.standard_normal(x.size)
    given = bvpkit.fit(_fin(1.5), {"theta": (x, y)}, vary={"L": 1.0, "m": 1.5}, sigma=0.005)
    assert given.success and all(abs(given.values[k] - t) < 4 * given.errors[k] for k, t in (("L", 1.2), ("m", 2.0)))
    # without sigma the covariance is scaled by chi^2 / (N - n) of the unit-weight fit (common practice,
    # no source): the errors are those of the fit with sigma times sqrt(chi^2_sigma / dof)
    estimated = bvpkit.fit(_fin(1.5), {"theta": (x, y)}, vary={"L": 1.0, "m": 1.5})
    factor = math.sqrt(given.chi_square / given.degrees_of_freedom)
    for k in ("L", "m"):
        assert estimated.values[k] == pytest.approx(given.values[k], rel=1e-6)
        assert estimated.errors[k] == pytest.approx(given.errors[k] * factor, rel=1e-4)


def test_a_solve_that_fails_inside_the_fit_shrinks_the_step(monkeypatch):
    from bvpkit.solver import driver

    real = driver.solve
    calls = {"n": 0}

    def flaky(problem, **kw):
        calls["n"] += 1
        sol = real(problem, **kw)
        if calls["n"] == 2:  # the first trial step: reported failed, as a solve past a fold would be
            sol.success = False
        return sol

    monkeypatch.setattr(driver, "solve", flaky)
    result = bvpkit.fit(_fin(), {"theta": (X, _noisy())}, vary={"m": 1.0}, sigma=SIGMA)
    assert calls["n"] > 3 and result.success and abs(result.values["m"] - M_TRUE) < 4 * result.errors["m"]
