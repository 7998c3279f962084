"""What a new user meets: primes on brackets, integrals in outputs, failed solves that give no
numbers as answers (Python and the command line), a Solution given where a guess expression
belongs, a mistyped function name, units in summaries and CSV headers."""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pytest

import bvpkit
from bvpkit.errors import BvpkitError, ProblemError, SpecError
from bvpkit.io import cli
from bvpkit.io.spec import loads

# -- a fin whose conductivity grows with temperature: k = k0 (1 + b T) ----------------------------
FIN = {"conditions": ["T(0) = 1", "T'(1) = 0"], "domain": (0, 1), "constants": {"b": 0.4, "m2": 2.0}}


def test_a_prime_on_a_bracket_solves_as_the_expanded_equation():
    bracket = bvpkit.solve(bvpkit.Problem(["((1 + b*T)*T')' = m2*T"], **FIN), tol=1e-10)
    expanded = bvpkit.solve(bvpkit.Problem(["(1 + b*T)*T'' + b*T'**2 = m2*T"], **FIN), tol=1e-10)
    assert bracket.success and expanded.success
    x = np.linspace(0, 1, 41)
    for what in ("T", "T'"):
        assert np.max(np.abs(bracket.evaluate(what, at=x) - expanded.evaluate(what, at=x))) < 1e-10
    # analytic: multiplying ((1 + bT) T')' = m2 T by (1 + bT) T' and integrating from 0 to 1 with
    # T'(1) = 0 gives ((1 + b T0) T'(0))^2 = 2 m2 [(T0^2 - Tt^2)/2 + b (T0^3 - Tt^3)/3]
    b, m2, t0 = 0.4, 2.0, 1.0
    tt = bracket.evaluate("T(1)")
    flux = math.sqrt(2 * m2 * ((t0**2 - tt**2) / 2 + b * (t0**3 - tt**3) / 3)) / (1 + b * t0)
    assert bracket.evaluate("T'(0)") == pytest.approx(-flux, rel=1e-8)


def test_integrals_in_outputs_and_in_evaluate():
    pellet = bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c(1) = 1"], (0, 1), independent="r",
                            constants={"phi": 2.0},
                            outputs={"by_volume": "3*integral(r**2*c)", "by_flux": "3*c'(1)/phi**2",
                                     "mixed": "integral(c) + c(0)", "odd": "integral(sin(c))*c'(1)"})
    sol = bvpkit.solve(pellet, tol=1e-10)
    phi = 2.0
    exact = 3 * (phi / math.tanh(phi) - 1) / phi**2  # analytic: effectiveness of a first-order sphere
    assert sol.outputs["by_volume"] == pytest.approx(exact, rel=1e-8)
    assert sol.outputs["by_flux"] == pytest.approx(exact, rel=1e-8)
    # analytic: c = sinh(phi r) / (r sinh(phi)); c(0) = phi / sinh(phi)
    from scipy.integrate import quad

    c = lambda r: math.sinh(phi * r) / (r * math.sinh(phi)) if r > 0 else phi / math.sinh(phi)  # noqa: E731
    assert sol.outputs["mixed"] == pytest.approx(quad(c, 0, 1)[0] + phi / math.sinh(phi), rel=1e-8)
    exact_sin = quad(lambda r: math.sin(c(r)), 0, 1)[0]
    assert sol.evaluate("integral(sin(c))") == pytest.approx(exact_sin, rel=1e-8)


# -- failed solves give no numbers as answers ------------------------------------------------------
ORBIT_SPEC = """
title = "Our oscillator from the resting state"
[problem]
independent = "t"
domain = [0, "T"]
equations = ["u'' - (1 - u**2)*u' + u = 0"]
conditions = ["u(0) = u(T)", "u'(0) = u'(T)"]
unknown_parameters = { T = 6.5 }
[outputs]
period = "T"
amplitude = "u(0)"
"""


@pytest.fixture(scope="module")
def failed():
    sol = bvpkit.solve(loads(ORBIT_SPEC))  # u = 0 is the resting state: no orbit to find from it
    assert not sol.success
    return sol


def test_a_failed_solution_refuses_its_numbers_unless_asked(failed, tmp_path):
    for call in (lambda: failed.evaluate("u(0)"), lambda: failed.integrate("u**2"), failed.table,
                 lambda: failed.to_csv(tmp_path / "x.csv")):
        with pytest.raises(BvpkitError, match=r"this solve failed \(\w+\), so its numbers are not an answer.*"
                                              r"allow_failed=True"):
            call()
    assert not (tmp_path / "x.csv").exists()
    assert np.isfinite(failed.evaluate("u(0)", allow_failed=True))
    assert set(failed.table(allow_failed=True)) == {"t", "u", "u'"}
    failed.to_csv(tmp_path / "x.csv", allow_failed=True)
    header = (tmp_path / "x.csv").read_text().splitlines()[0]
    word = failed.status.word
    assert header == f"t (failed: {word}),u (failed: {word}),u' (failed: {word})"
    assert failed.outputs == {} and failed.as_dict()["outputs"] == {"period": None, "amplitude": None}


def test_a_failed_cli_solve_prints_no_number_labelled_as_an_output(tmp_path, capsys, monkeypatch):
    spec = tmp_path / "orbit.toml"
    spec.write_text(ORBIT_SPEC)
    monkeypatch.chdir(tmp_path)
    code = cli.main(["solve", str(spec), "--csv", "mesh.csv"])
    out = capsys.readouterr().out
    assert code not in (0, 2, 70)
    labelled = re.compile(r"\b(period|amplitude|T)\b\s*[=:]\s*[-+]?(\d|\.\d|inf|nan)", re.IGNORECASE)
    assert not labelled.search(out), out
    assert "no outputs are given: the solve failed" in out
    assert "mesh solution of the failed solve (headers marked failed) written to mesh.csv" in out
    assert "(failed: " in (tmp_path / "mesh.csv").read_text().splitlines()[0]
    code = cli.main(["solve", str(spec), "--json"])
    report = json.loads(capsys.readouterr().out)
    assert report["success"] is False
    assert report["outputs"] == {"period": None, "amplitude": None}
    assert report["parameters"] == {"T": None} and report["parameter_errors"] == {"T": None}
    assert report["output_errors"] == {"period": None, "amplitude": None}


def test_the_oscillator_of_the_readme_solves_from_the_guess_it_gives():
    orbit = bvpkit.Problem(["u'' - (1 - u**2)*u' + u = 0"], ["u(0) = u(T)", "u'(0) = u'(T)"], (0, "T"),
                           unknown_parameters={"T": 6.5}, guess={"u": "2*cos(2*pi*x/T)"})
    sol = bvpkit.solve(orbit, tol=1e-8)
    assert sol.success
    # Van der Pol oscillator with mu = 1: period 6.6632868593 (Grimshaw 1990, Nonlinear ordinary
    # differential equations, table of limit-cycle periods; from memory)
    assert sol.parameters["T"] == pytest.approx(6.6632868593, rel=1e-8)


def test_a_solution_given_as_the_problems_guess_says_where_it_belongs():
    p = bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1))
    sol = bvpkit.solve(p)
    with pytest.raises(ProblemError, match=r"guess: a previous Solution is a start for the solver.*"
                                           r"bvpkit.solve\(problem, guess=solution\)"):
        bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1), guess=sol)
    with pytest.raises(ProblemError, match=r"guess for 'y': a previous Solution .*guess=solution"):
        bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1), guess={"y": sol})
    with pytest.raises(ProblemError, match=r"guess must be a mapping of function name to expression.*list"):
        bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1), guess=["x"])
    again = bvpkit.solve(p, guess=sol)  # where it belongs
    assert again.success and again.evaluate("y'(0)") == pytest.approx(1 / math.sin(1), rel=1e-6)  # analytic


def test_a_mistyped_function_name_suggests_the_closest_known_function():
    with pytest.raises(ProblemError, match=r"'exq' is not a known function \(did you mean 'exp'\?\)"):
        bvpkit.Problem(["y'' = exq(y)"], ["y(0) = 0", "y(1) = 1"], (0, 1))
    with pytest.raises(ProblemError, match=r"'tahn' is not a known function \(did you mean 'tan'\?\); "
                                           r"as written it is read as another unknown function"):
        bvpkit.Problem(["y'' = tahn(x)"], ["y(0) = 0", "y(1) = 1"], (0, 1))
    with pytest.raises(SpecError, match=r"spec: \[problem\] equation 1: 'sinn' is not a known function "
                                        r"\(did you mean 'sin'\?\)"):
        loads('[problem]\ndomain = [0, 1]\nequations = ["y\'\' = sinn(x*y)"]\nconditions = ["y(0) = 0", '
                     '"y(1) = 1"]\n', "spec")


# -- units ------------------------------------------------------------------------------------------------
SHELF = """
title = "Our shelf arm"
[problem]
domain = [0, "L"]
equations = ["EI*w'''' = q"]
conditions = ["w(0) = 0", "w'(0) = 0", "w''(L) = 0", "w'''(L) = 0"]
constants = { EI = 9.0e4, q = 1500.0, L = 1.2 }
[outputs]
tip = "w(L)"
[units]
x = "m"
w = "m"
q = "N/m"
tip = "m"
"""


def test_units_appear_in_the_summary_and_the_csv_header(tmp_path):
    sol = bvpkit.solve(loads(SHELF), tol=1e-9)
    # analytic: cantilever under a uniform load, tip deflection q L^4 / (8 EI)
    assert sol.outputs["tip"] == pytest.approx(1500.0 * 1.2**4 / (8 * 9.0e4), rel=1e-9)
    assert re.search(r"^  tip = 0\.00432\d* m  \(\+/- ", sol.summary(), re.MULTILINE)
    sol.to_csv(tmp_path / "shelf.csv")
    header = (tmp_path / "shelf.csv").read_text().splitlines()[0]
    assert header == "x [m],w [m],w' [m/m],w'' [m/m^2],w''' [m/m^3]"
    assert sol.units == {"x": "m", "w": "m", "q": "N/m", "tip": "m"}


def test_a_spec_without_units_is_as_before(tmp_path):
    sol = bvpkit.solve(loads(SHELF.split("[units]")[0]), tol=1e-9)
    sol.to_csv(tmp_path / "plain.csv")
    assert (tmp_path / "plain.csv").read_text().splitlines()[0] == "x,w,w',w'',w'''"
    assert re.search(r"^  tip = 0\.00432\d*  \(\+/- ", sol.summary(), re.MULTILINE)


@pytest.mark.parametrize(("units", "message"), [
    ('wq = "m"', r"\[units\] gives a unit for 'wq', which is not a name of the problem "
                 r"\(did you mean 'w'\?\)"),
    ("w = 3", r"units.w: expected text in quotes, got the number 3 \(put it in quotes\)"),
    ('w = ""', r"the unit of 'w' must be 1 to 40 printable characters"),
])
def test_bad_units_are_refused_by_name(units, message):
    with pytest.raises(SpecError, match=message):
        loads(SHELF.split("[units]")[0] + "[units]\n" + units + "\n")


def test_assert_converges_says_when_its_reference_solve_failed():
    from bvpkit.testing import VerificationError, assert_converges

    contradictory = bvpkit.Problem(["y'' = y"], ["y(0) = 0", "y(0) = 1"], (0, 1))
    with pytest.raises(VerificationError, match=r"the reference solve at tol = 1e-08 failed: .*singular"):
        assert_converges(contradictory, quantity="y(1)")
