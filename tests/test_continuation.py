"""Continuation through folds, against analytic and published values."""

import json
import math

import numpy as np
import pytest
from catalogue import bratu_slope
from scipy.optimize import minimize_scalar

import bvpkit
from bvpkit.io.cli import main


def bratu(lam=1.0):
    return bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": lam})


def bratu_fold() -> float:
    # analytic: lam = t^2 / (2 cosh^2(t/4)) along the family; its maximum over t is the fold
    res = minimize_scalar(lambda t: -(t**2) / (2 * math.cosh(t / 4) ** 2), bounds=(1, 10), method="bounded",
                          options={"xatol": 1e-12})
    return -res.fun


@pytest.fixture(scope="module")
def bratu_branch():
    return bvpkit.trace(bratu(0.1), "lam", start=0.1, stop=5.0, outputs=["y'(0)", "y(1/2)"], tol=1e-8)


def test_bratu_fold_is_located_to_1e8(bratu_branch):
    b = bratu_branch
    assert b.success, b.message
    assert len(b.folds) == 1
    fold = b.folds[0]
    assert fold.parameter == pytest.approx(bratu_fold(), rel=1e-8)  # analytic, 3.51383071912516
    assert fold.parameter == pytest.approx(3.51383071912516, rel=1e-8)  # the value quoted in the issue
    assert fold.error < 1e-7
    assert fold.outputs["y'(0)"] == pytest.approx(4.0, rel=1e-6)  # analytic: t tanh(t/4) = 4 at the fold


def test_a_first_step_far_beyond_the_range_is_clamped_and_the_fold_is_found(monkeypatch):
    """A first step of 1e80 once cost minutes (halved one failed solve at a time at the end of
    the range); it is clamped to a quarter of the range, and halving is bounded by a count."""
    from bvpkit.families import continuation

    tried = []
    at = continuation._Tracer._at

    def counted(self, target, guess, *args, **kwargs):
        tried.append(target)
        return at(self, target, guess, *args, **kwargs)

    monkeypatch.setattr(continuation._Tracer, "_at", counted)
    b = bvpkit.trace(bratu(0.1), "lam", start=0.1, stop=5.0, step=1e80, outputs=["y'(0)"])
    assert abs(tried[0] - 0.1) <= (5.0 - 0.1) / 4 * (1 + 1e-12)
    assert len(tried) < 100  # natural solves in all (about 20 here)
    assert len(b.folds) == 1
    assert b.folds[0].parameter == pytest.approx(bratu_fold(), rel=1e-6)  # analytic, 3.51383071912516


def test_bratu_branch_goes_past_the_fold_onto_the_upper_family(bratu_branch):
    b = bratu_branch
    lam, slope = b.parameter, b.outputs["y'(0)"]
    assert lam.max() < 3.52 and "arclength" in b.steps
    # every point lies on the analytic family (lower or upper root of t = sqrt(2 lam) cosh(t/4))
    for value, s in zip(lam, slope):
        branch = "upper" if s > 4 else "lower"
        assert s == pytest.approx(bratu_slope(value, branch), rel=1e-7)
    # the upper branch at lam = 1, reached from the nearest traced point: y'(0) = 10.8468990194 (analytic)
    upper = [i for i, s in enumerate(slope) if s > 4]
    nearest = min(upper, key=lambda i: abs(lam[i] - 1.0))
    sol = bvpkit.solve(bratu(1.0), guess=b.solutions[nearest], tol=1e-9)
    assert sol.evaluate("y'(0)") == pytest.approx(10.8468990194, rel=1e-9)
    assert b.parameter[-1] == pytest.approx(0.1)  # it came back to the start side of the range


def _bratu_states(lam: float, slope: float, x: np.ndarray) -> list[np.ndarray]:
    """Analytic y and y' on the branch through (lam, y'(0) ~ slope): y = -2 ln(cosh((x - 1/2) t/2) / cosh(t/4))
    with t = sqrt(2 lam) cosh(t/4), the root whose t tanh(t/4) is nearest the slope."""
    from scipy.optimize import brentq

    g = lambda t: t - math.sqrt(2 * lam) * math.cosh(t / 4)  # noqa: E731
    roots = [brentq(g, lo, hi) for lo, hi in ((1e-9, 4.7987), (4.7987, 40.0)) if g(lo) * g(hi) < 0]
    t = min(roots, key=lambda r: abs(r * math.tanh(r / 4) - slope))
    return [-2 * np.log(np.cosh((x - 0.5) * t / 2) / math.cosh(t / 4)), -t * np.tanh((x - 0.5) * t / 2)]


@pytest.mark.parametrize("tol", [1e-5, 1e-8])
def test_every_traced_point_meets_the_tolerance_with_an_honest_estimate(tol):
    b = bvpkit.trace(bratu(0.1), "lam", start=0.1, stop=3.6, outputs=["y'(0)"], tol=tol, max_points=80)
    assert b.success and "arclength" in b.steps
    for lam, s, how in zip(b.parameter, b.solutions, b.steps):
        assert s.success, (how, lam, s.message)  # arclength points past the fold remesh when they must
        x = np.unique(np.concatenate([s.x, 0.5 * (s.x[1:] + s.x[:-1])]))
        exact = _bratu_states(lam, s.evaluate("y'(0)"), x)  # analytic, see _bratu_states
        true = max(float(np.max(np.abs(s.evaluate(n, at=x) - e) / (1 + np.abs(e)))) for n, e in zip(("y", "y'"), exact))
        estimate = s.diagnostics.error_estimate
        assert estimate <= tol and true <= 2 * estimate + 1e-12, (how, lam, true, estimate)
        if how == "arclength":
            assert estimate <= 2 * true, (lam, true, estimate)
    fold = b.folds[0]
    # the fold's own point: its estimate is the distance to the exact branch, of the size of
    # the fold's parameter error (analytic fold 3.51383071912516)
    miss = abs(fold.parameter - bratu_fold()) / bratu_fold()
    assert 0.2 * miss <= fold.solution.diagnostics.error_estimate <= 5 * miss + 1e-12


def test_falkner_skan_family_from_beta_one_down_to_zero():
    p = bvpkit.Problem(["f''' + f*f'' + beta*(1 - f'**2) = 0"], ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"],
                       (0, "inf"), independent="eta", constants={"beta": 1.0}, guess={"f": "eta - 1 + exp(-eta)"})
    b = bvpkit.trace(p, "beta", start=1.0, stop=0.0, outputs=["f''(0)"], tol=1e-9)
    assert b.success, b.message
    shear = b.outputs["f''(0)"]
    # Hartree 1937; White, Viscous Fluid Flow, table of Falkner-Skan solutions
    assert shear[0] == pytest.approx(1.232587658, rel=1e-8)
    assert shear[-1] == pytest.approx(0.469599988, rel=1e-8)
    assert np.all(np.diff(shear) < 0)  # smooth, monotone in beta: no jumps to another family
    assert not b.folds


def test_branch_table_csv_json_and_plot(bratu_branch, tmp_path):
    b = bratu_branch
    table = b.table()
    assert list(table) == ["lam", "y'(0)", "y(1/2)", "step"]
    b.to_csv(tmp_path / "b.csv")
    lines = (tmp_path / "b.csv").read_text().splitlines()
    assert len(lines) == len(b.parameter) + 1
    data = json.loads(json.dumps(b.as_dict(), allow_nan=False))
    assert data["folds"][0]["parameter"] == pytest.approx(3.51383071912516, rel=1e-8)
    pytest.importorskip("matplotlib")
    b.plot(tmp_path / "b.png")
    assert (tmp_path / "b.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_trace_checks_its_arguments():
    with pytest.raises(bvpkit.OptionError, match="not a constant of the problem .*did you mean 'lam'"):
        bvpkit.trace(bratu(), "lamb", start=0, stop=1)
    with pytest.raises(bvpkit.OptionError, match="start and stop must differ"):
        bvpkit.trace(bratu(), "lam", start=1, stop=1)
    with pytest.raises(bvpkit.ProblemError, match="'z' is not an unknown function"):
        bvpkit.trace(bratu(), "lam", start=0.1, stop=1, outputs=["z(0)"])


def test_natural_steps_use_the_selector_and_record_diagnostics():
    b = bvpkit.trace(bratu(0.1), "lam", start=0.1, stop=1.0, outputs=["y'(0)"], tol=1e-8)
    assert b.success and not b.folds and set(b.steps) == {"natural"}
    for s in b.solutions:
        assert s.diagnostics.selection.startswith("chose ")
        assert s.diagnostics.error_estimate <= 1e-8
    assert b.outputs["y'(0)"][-1] == pytest.approx(bratu_slope(1.0, "lower"), rel=1e-8)  # analytic


def test_cli_trace_prints_the_fold_and_writes_a_plot(tmp_path, capsys):
    from pathlib import Path

    spec = Path(__file__).resolve().parent.parent / "specs/reacting_slab_ignition.toml"
    pytest.importorskip("matplotlib")
    code = main(["trace", str(spec), "--quiet", "--plot", str(tmp_path / "fold.png"), "--csv", str(tmp_path / "b.csv")])
    out = capsys.readouterr().out
    assert code == 0
    import re

    found = re.search(r"fold at lam = (\S+) \(\+/- (\S+)\)", out)
    assert found, out
    # analytic: the Bratu fold 3.51383071912516 (the root of the fold equation; see catalogue)
    assert abs(float(found.group(1)) - 3.51383071912516) <= max(1e-9, 10 * float(found.group(2)))
    assert (tmp_path / "fold.png").exists() and (tmp_path / "b.csv").exists()
    assert main(["trace", str(spec), "--json", "--max-points", "5"]) == bvpkit.Status.NOT_CONVERGED.exit_code
    data = json.loads(capsys.readouterr().out)
    assert data["success"] is False and "max_points" in data["message"] and len(data["parameter"]) == 5
