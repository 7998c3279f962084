"""Algebraic equations beside the differential ones: index-1 boundary-value DAEs.

Checks against closed forms derived here (the algebraic unknown eliminated by hand), against
the same problem with the algebraic unknown eliminated and solved as an ODE, against
manufactured solutions, and the convergence order of the methods on an index-1 problem.
"""

from __future__ import annotations

import importlib.util
import json
import math
import re

import numpy as np
import pytest
from hypothesis import given, settings

import bvpkit
from bvpkit.errors import ProblemError
from bvpkit.testing import assert_matches_exact, assert_solves, index_one_problems, scaled_examples

EXCHANGER = ["Th' = -a*(Th - Tw)", "Tc' = -b*(Tw - Tc)", "0 = h1*(Th - Tw) - h2*(Tw - Tc)"]
EXCHANGER_CONSTANTS = {"a": 2.0, "b": 1.5, "h1": 1.0, "h2": 3.0}


def exchanger(**extra):
    return bvpkit.Problem(EXCHANGER, ["Th(0) = 1", "Tc(1) = 0"], (0, 1), unknowns=["Th", "Tc", "Tw"],
                          constants=dict(EXCHANGER_CONSTANTS), outputs={"wall0": "Tw(0)"}, **extra)


def wall_at_inlet(a: float, b: float, h1: float, h2: float) -> float:
    """Tw(0) of the counterflow exchanger, by hand (analytic: Tw eliminated).

    The wall balance gives Tw = (h1 Th + h2 Tc) / H with H = h1 + h2, so Th - Tw = h2 D / H and
    Tw - Tc = h1 D / H with D = Th - Tc. Then Th' = -al D, Tc' = -be D (al = a h2 / H,
    be = b h1 / H), D' = -k D with k = al - be: D = D0 exp(-k x), Th = 1 - al D0 (1 - exp(-k x)) / k.
    Tc(1) = Th(1) - D(1) = 0 fixes D0 = 1 / (al (1 - exp(-k)) / k + exp(-k)); Tw(0) = (h1 + h2 (1 - D0)) / H.
    """
    H = h1 + h2
    al, be = a * h2 / H, b * h1 / H
    k = al - be
    decay = math.exp(-k)
    d0 = 1.0 / (al * (1.0 - decay) / k + decay)
    return (h1 + h2 * (1.0 - d0)) / H


def test_counterflow_wall_temperature_against_the_closed_form():
    sol = bvpkit.solve(exchanger(), tol=1e-10)
    assert sol.success, sol.message
    expected = wall_at_inlet(**EXCHANGER_CONSTANTS)  # analytic: Tw eliminated by hand (docstring above)
    assert sol.outputs["wall0"] == pytest.approx(expected, abs=1e-8)
    # the wall balance holds at every point the solution reports (the algebraic equation, to round-off)
    x = np.linspace(0, 1, 9)
    th, tc, tw = (sol.evaluate(name, at=x) for name in ("Th", "Tc", "Tw"))
    assert np.max(np.abs(1.0 * (th - tw) - 3.0 * (tw - tc))) < 1e-12


@pytest.mark.parametrize("method", ["collocation6", "multiple_shooting"])
def test_every_method_takes_the_algebraic_class(method):
    sol = bvpkit.solve(exchanger(), tol=1e-9, method=method)
    assert sol.success, sol.message
    assert sol.outputs["wall0"] == pytest.approx(wall_at_inlet(**EXCHANGER_CONSTANTS), abs=1e-8)  # analytic, above


def test_counterflow_traced_in_the_wall_coefficient(tmp_path):
    branch = bvpkit.trace(exchanger(), "h1", start=1.0, stop=8.0, outputs=["Tw(0)"], tol=1e-9, at=[5])
    (point,) = branch.requested[5]
    if importlib.util.find_spec("matplotlib"):  # the figure of an algebraic unknown's output, like any other
        figure = branch.plot(tmp_path / "wall.png")
        assert figure is not None and (tmp_path / "wall.png").stat().st_size > 5_000
    expected = wall_at_inlet(a=2.0, b=1.5, h1=5.0, h2=3.0)  # analytic: Tw eliminated by hand
    assert point.evaluate("Tw(0)") == pytest.approx(expected, abs=1e-7)
    along = np.array([wall_at_inlet(2.0, 1.5, h1, 3.0) for h1 in branch.parameter])  # analytic, each point
    assert np.max(np.abs(branch.outputs["Tw(0)"] - along)) < 1e-7


def test_second_order_equation_with_an_equilibrium_against_elimination_by_hand():
    constants = {"k": 4.0, "K": 0.5}
    dae = bvpkit.Problem(["c'' = k*(c - ce)", "0 = ce - K*c/(1 + c)"], ["c'(0) = 0", "c(1) = 1"], (0, 1),
                         unknowns=["c", "ce"], constants=constants)
    # the same problem with ce eliminated by hand (analytic: ce = K c / (1 + c))
    ode = bvpkit.Problem(["c'' = k*(c - K*c/(1 + c))"], ["c'(0) = 0", "c(1) = 1"], (0, 1), constants=constants)
    a, b = bvpkit.solve(dae, tol=1e-10), bvpkit.solve(ode, tol=1e-10)
    assert a.success and b.success, (a.message, b.message)
    x = np.linspace(0, 1, 11)
    assert np.max(np.abs(a.evaluate("c", at=x) - b.evaluate("c", at=x))) < 1e-8
    c0 = b.evaluate("c(0)")
    assert a.evaluate("ce(0)") == pytest.approx(0.5 * c0 / (1 + c0), abs=1e-8)  # analytic: its equation


TWO_ROOTS = ["y'' = z - sin(x) - sqrt(1 + sin(x)**2)", "z**2 = 1 + y**2"]


def test_the_guess_picks_the_branch_of_a_constraint_with_two_roots():
    """Manufactured: y = sin(x), z = sqrt(1 + sin(x)**2) solve the problem on the positive branch
    (analytic: y'' = -sin(x) = z - sin(x) - sqrt(1 + sin(x)**2)); the negative branch is another
    problem, y'' = -sqrt(1 + y**2) - sin(x) - sqrt(1 + sin(x)**2), solved here as an ODE."""
    problem = bvpkit.Problem(TWO_ROOTS, ["y(0) = 0", "y(1) = sin(1)"], (0, 1), unknowns=["y", "z"])
    x = np.linspace(0, 1, 11)
    upper = bvpkit.solve(problem, tol=1e-10, guess={"z": "1.5"})
    assert upper.success, upper.message
    assert np.max(np.abs(upper.evaluate("y", at=x) - np.sin(x))) < 1e-8  # manufactured
    assert np.max(np.abs(upper.evaluate("z", at=x) - np.sqrt(1 + np.sin(x) ** 2))) < 1e-8  # manufactured
    lower = bvpkit.solve(problem, tol=1e-10, guess={"z": "-1.5"})
    assert lower.success, lower.message
    ode = bvpkit.Problem(["y'' = -sqrt(1 + y**2) - sin(x) - sqrt(1 + sin(x)**2)"], ["y(0) = 0", "y(1) = sin(1)"],
                         (0, 1))
    reference = bvpkit.solve(ode, tol=1e-10)  # the negative root eliminated by hand
    assert np.max(np.abs(lower.evaluate("y", at=x) - reference.evaluate("y", at=x))) < 1e-8
    z = lower.evaluate("z", at=x)
    assert np.all(z < 0) and np.max(np.abs(z + np.sqrt(1 + lower.evaluate("y", at=x) ** 2))) < 1e-10
    # a solution keeps its own branch after the other was solved
    assert np.all(upper.evaluate("z", at=x) > 0)
    # continuing from a solution stays on its branch
    again = bvpkit.solve(problem, tol=1e-10, guess=lower)
    assert np.all(again.evaluate("z", at=x) < 0)


def test_the_default_start_is_newton_from_a_constant():
    """No guess: Newton's method for z from 0 meets dG/dz = 2 z = 0, so it starts from 1: the
    positive root (the documented default)."""
    problem = bvpkit.Problem(TWO_ROOTS, ["y(0) = 0", "y(1) = sin(1)"], (0, 1), unknowns=["y", "z"])
    sol = bvpkit.solve(problem, tol=1e-8)
    assert sol.success and sol.evaluate("z(0.5)") == pytest.approx(math.sqrt(1 + math.sin(0.5) ** 2), abs=1e-7)


def _fixed_mesh_errors(method: str, nodes: list[int]) -> tuple[list[float], list[float]]:
    """Errors of y and z at the nodes of uniform meshes (no refinement) for the smooth index-1
    problem y'' = -z - 4 sin(2x) + cos(x), 0 = z + z**3/3 - y - q(x) on [0, 3/2]; manufactured:
    y = sin(2x), z = cos(x) (q = cos(x) + cos(x)**3/3 - sin(2x); dG/dz = 1 + z**2 >= 1)."""
    from bvpkit.methods import collocation, collocation6
    from bvpkit.methods.discrete import CollocationEquations

    problem = bvpkit.Problem(["y'' = -z - 4*sin(2*x) + cos(x)", "0 = z + z**3/3 - y - cos(x) - cos(x)**3/3 + sin(2*x)"],
                             ["y(0) = 0", "y(3/2) = sin(3)"], (0, 1.5), unknowns=["y", "z"])
    prepared = bvpkit.prepare(problem)
    compiled, k, p = prepared.compiled, prepared.k(), np.zeros(0)
    ey, ez = [], []
    for m in nodes:
        t = np.linspace(0.0, 1.0, m)
        x = 1.5 * t
        exact = np.array([np.sin(2 * x), 2 * np.cos(2 * x)])
        start = exact * (1 + 1e-3 * np.cos(7 * x))  # a start near, not at, the discrete solution
        compiled.seed(t, start, p, k)
        if method == "collocation":
            eq = CollocationEquations(compiled, t, k)
            y = start
            for _ in range(4):
                y, p, _, _, _, settled = collocation._newton(eq, y, p, 1e-14)
                if settled:
                    break
        else:
            y0, stages = collocation6._start(compiled, None, t, start, t, p, k)
            y = collocation6._newton(compiled, t, y0, stages, p, k, 1e-14).y
        z = compiled.algebraic(t, y, p, k)[0]
        ey.append(float(np.max(np.abs(y[0] - exact[0]))))
        ez.append(float(np.max(np.abs(z - np.cos(x)))))
    return ey, ez


@pytest.mark.parametrize("method, nodes, expected", [
    # Lobatto IIIA collocation with 3 stages: order 4 at the nodes; with 4 stages: order 6
    # (Ascher, Mattheij and Russell, Numerical Solution of BVPs for ODEs, SIAM 1995, sec. 5.6,
    # superconvergence 2s - 2 of Lobatto points). The state-space form is the method applied to
    # an ODE, and z = Z(x, y) at the nodes inherits the order of y.
    ("collocation", [9, 17, 33, 65], 4.0),
    ("collocation6", [5, 9, 17, 33], 6.0),
])
def test_convergence_order_of_differential_and_algebraic_states(method, nodes, expected):
    ey, ez = _fixed_mesh_errors(method, nodes)
    h = 1.5 / (np.array(nodes) - 1)
    for errors in (ey, ez):
        slope = float(np.polyfit(np.log(h), np.log(errors), 1)[0])
        assert abs(slope - expected) < 0.4, (method, slope, errors)


def test_conditions_on_algebraic_unknowns():
    # Tw(1) = 0.07 in place of Tc(1) = 0: the cold inlet then follows from the wall balance there
    problem = bvpkit.Problem(EXCHANGER, ["Th(0) = 1", "Tw(1) = 0.25"], (0, 1), unknowns=["Th", "Tc", "Tw"],
                             constants=dict(EXCHANGER_CONSTANTS))
    sol = bvpkit.solve(problem, tol=1e-10)
    assert sol.success, sol.message
    th, tc = sol.evaluate("Th(1)"), sol.evaluate("Tc(1)")
    assert (1.0 * th + 3.0 * tc) / 4.0 == pytest.approx(0.25, abs=1e-10)  # analytic: the wall balance at x = 1


@pytest.mark.parametrize("kwargs, words", [
    # a higher-index system: the constraint holds no algebraic unknown
    (dict(equations=["y' = z", "0 = y - sin(x)"], conditions=["y(0) = 0"], unknowns=["y", "z"]),
     ["index", "differentiate the constraint once", "0 = z - cos(x)"]),
    # an algebraic unknown no algebraic equation determines
    (dict(equations=["y' = z + w", "0 = z - y", "0 = z**2 - 1 - y**2"], conditions=["y(0) = 0"],
          unknowns=["y", "z", "w"]), ["index", "'w' is determined by no algebraic equation"]),
    # more conditions than the differential order allows
    (dict(equations=EXCHANGER, conditions=["Th(0) = 1", "Tc(1) = 0", "Tw(1) = 0.3"], unknowns=["Th", "Tc", "Tw"],
          constants=EXCHANGER_CONSTANTS), ["3 boundary condition(s) given, 2 needed", "over-determines"]),
    # a condition on an algebraic unknown that no state affects
    (dict(equations=["y' = -y + z", "0 = z - 0.5"], conditions=["z(1) = 0.3"], unknowns=["y", "z"]),
     ["over-determines", "z is fixed at every point by its algebraic equation alone"]),
    # an equation without derivatives when every unknown has one
    (dict(equations=["f' + g' = 1", "0 = f - g"], conditions=["f(0) = 0", "g(0) = 0"]),
     ["index", "0 = f' - g'"]),
    # an algebraic unknown not listed is not an unknown
    (dict(equations=["y' = z", "0 = z - y"], conditions=["y(0) = 1"]), ["list it among the unknown functions"]),
    (dict(equations=["y' = z", "0 = z - y"], conditions=["z'(0) = 1"], unknowns=["y", "z"]),
     ["algebraic unknown", "its value z(0)"]),
])
def test_bad_input_is_one_clear_line(kwargs, words):
    with pytest.raises(ProblemError) as caught:
        bvpkit.Problem(kwargs.pop("equations"), kwargs.pop("conditions"), (0, 1), **kwargs)
    message = str(caught.value)
    assert "\n" not in message
    for word in words:
        assert word in message, message


def _place(message: str) -> float:
    found = re.search(r"x = (-?[0-9.]+)", message)
    assert found, message
    return float(found.group(1))


def test_a_turning_point_of_the_constraint_is_said_with_where():
    # y = x + 1/2 reaches 1 at x = 1/2, where z**2 + y - 1 = 0 loses its roots (dG/dz = 2 z = 0)
    problem = bvpkit.Problem(["y' = 1", "u' = z", "0 = z**2 + y - 1"], ["y(0) = 0.5", "u(0) = 0"], (0, 1),
                             unknowns=["y", "u", "z"])
    sol = bvpkit.solve(problem, method="collocation6", max_nodes=300)
    assert not sol.success
    assert "index 1 is lost" in sol.message and "turning point" in sol.message
    assert _place(sol.message) == pytest.approx(0.5, abs=0.05)  # analytic: y(x) = 1 at x = 1/2
    # the default solve (the selector, continuation from an easier problem) says the same
    sol = bvpkit.solve(problem, time_limit=1.5)
    assert not sol.success and "index 1 is lost" in sol.message
    assert _place(sol.message) == pytest.approx(0.5, abs=0.05)


def test_a_singular_algebraic_jacobian_along_a_converged_solution_is_refused():
    # z**2 = y**2 with y = x - 1/2: the branches z = y and z = -y cross at x = 1/2, dG/dz = 2 z = 0 there
    problem = bvpkit.Problem(["y' = 1", "u' = z", "0 = z**2 - y**2"], ["y(0) = -0.5", "u(0) = 0"], (0, 1),
                             unknowns=["y", "u", "z"], guess={"z": "0.5 - x"})
    sol = bvpkit.solve(problem, method="collocation")
    assert sol.status is bvpkit.Status.SINGULAR
    assert "index 1 is lost" in sol.message
    assert _place(sol.message) == pytest.approx(0.5, abs=1e-3)  # analytic: y(1/2) = 0


def test_outputs_tables_csv_and_json_carry_the_algebraic_unknowns(tmp_path):
    sol = bvpkit.solve(exchanger(), tol=1e-8)
    assert sol.state_names == ("Th", "Tc", "Tw")
    assert sol.y.shape == (3, sol.x.size)
    table = sol.table()
    assert list(table) == ["x", "Th", "Tc", "Tw"]
    th, tc, tw = table["Th"], table["Tc"], table["Tw"]
    assert np.max(np.abs((th - tw) - 3 * (tw - tc))) < 1e-12  # the wall balance at every node
    path = tmp_path / "exchanger.csv"
    sol.to_csv(path)
    assert path.read_text().splitlines()[0] == "x,Th,Tc,Tw"
    data = json.loads(json.dumps(sol.as_dict()))
    assert data["state_names"] == ["Th", "Tc", "Tw"]
    assert "wall0" in sol.summary()
    assert sol.integrate("Tw") == pytest.approx(np.trapezoid(sol.evaluate("Tw", at=np.linspace(0, 1, 2001)),
                                                              np.linspace(0, 1, 2001)), abs=1e-6)


def test_the_check_printout_lists_differential_and_algebraic_states():
    from bvpkit.io.cli import check_report
    from bvpkit.reduce.form import standard_form

    problem = exchanger()
    report = check_report(problem, standard_form(problem))
    assert report["states"] == ["Th", "Tc"]
    assert list(report["algebraic"]) == ["Tw"]
    assert any(line.startswith("0 = ") and "(determines Tw)" in line for line in report["first_order"])


@pytest.mark.parametrize("case", ["parameter", "parameter in the algebraic equation", "free end", "regions", "infinite", "eigenvalue", "integral",
                                  "singular centre", "periodic"])
def test_pairings_with_the_other_classes(case):
    if case == "parameter":  # a of the hot side found from a condition on the wall
        p = bvpkit.Problem(EXCHANGER, ["Th(0) = 1", "Tc(1) = 0", "Tw(1) = 0.1"], (0, 1), unknowns=["Th", "Tc", "Tw"],
                           constants={"b": 1.5, "h1": 1.0, "h2": 3.0}, unknown_parameters={"a": 1.0})
        sol = bvpkit.solve(p, tol=1e-9)
        assert sol.success, sol.message
        assert sol.evaluate("Tw(1)") == pytest.approx(0.1, abs=1e-9)  # the condition it was found from
        assert wall_at_inlet(sol.parameters["a"], 1.5, 1.0, 3.0) == pytest.approx(sol.evaluate("Tw(0)"), abs=1e-7)
    elif case == "parameter in the algebraic equation":  # h1 from the wall temperature at the inlet
        p = bvpkit.Problem(EXCHANGER, ["Th(0) = 1", "Tc(1) = 0", "Tw(0) = 0.6"], (0, 1), unknowns=["Th", "Tc", "Tw"],
                           constants={"a": 2.0, "b": 1.5, "h2": 3.0}, unknown_parameters={"h1": 1.0})
        sol = bvpkit.solve(p, tol=1e-10)
        assert sol.success, sol.message
        from scipy.optimize import brentq

        # analytic: the closed form above solved for h1 by scipy's brentq
        h1 = brentq(lambda h: wall_at_inlet(2.0, 1.5, h, 3.0) - 0.6, 0.5, 10.0, xtol=1e-14)
        assert sol.parameters["h1"] == pytest.approx(h1, abs=1e-8)
    elif case == "free end":  # the length at which the wall reaches 0.1
        p = bvpkit.Problem(EXCHANGER, ["Th(0) = 1", "Tc(L) = 0", "Tw(L) = 0.1"], (0, "L"), unknowns=["Th", "Tc", "Tw"],
                           constants=EXCHANGER_CONSTANTS, unknown_parameters={"L": 1.0})
        sol = bvpkit.solve(p, tol=1e-9)
        assert sol.success, sol.message
        assert sol.evaluate("Tw(L)") == pytest.approx(0.1, abs=1e-9)
    elif case == "regions":  # h1 differs in the second half: the wall temperature jumps at x = 1/2
        p = bvpkit.Problem(EXCHANGER, ["Th(0) = 1", "Tc(1) = 0"], (0, 1), unknowns=["Th", "Tc", "Tw"],
                           constants=EXCHANGER_CONSTANTS,
                           regions=[{"end": 0.5, "constants": {"h1": 1.0}}, {"constants": {"h1": 4.0}}])
        sol = bvpkit.solve(p, tol=1e-9)
        assert sol.success, sol.message
        th, tc = sol.evaluate("Th(0.5)"), sol.evaluate("Tc(0.5)")  # continuous
        assert sol.evaluate("Tw(0.5-)") == pytest.approx((1 * th + 3 * tc) / 4, abs=1e-10)  # analytic: wall balance
        assert sol.evaluate("Tw(0.5+)") == pytest.approx((4 * th + 3 * tc) / 7, abs=1e-10)  # analytic: wall balance
    elif case == "infinite":  # y'' = w, w = y: y = exp(-x) (analytic)
        p = bvpkit.Problem(["y'' = w", "0 = w - y"], ["y(0) = 1", "y(inf) = 0"], (0, "inf"), unknowns=["y", "w"])
        sol = bvpkit.solve(p, tol=1e-7)
        assert sol.success, sol.message
        assert sol.evaluate("w(1)") == pytest.approx(math.exp(-1), abs=1e-6)  # analytic
    elif case == "eigenvalue":  # y'' + lam w = 0, w = 2 y: lam = pi**2 / 2 (analytic)
        p = bvpkit.Problem(["y'' + lam*w = 0", "0 = w - 2*y"], ["y(0) = 0", "y(1) = 0"], (0, 1), unknowns=["y", "w"],
                           eigenvalue="lam")
        sol = bvpkit.solve(p, tol=1e-9)
        assert sol.success, sol.message
        assert sol.parameters["lam"] == pytest.approx(math.pi**2 / 2, rel=1e-8)  # analytic
    elif case == "integral":  # y' = -w, w = y, integral(w) = 1: y = exp(-x) / (1 - exp(-1)) (analytic)
        p = bvpkit.Problem(["y' = -w", "0 = w - y"], ["integral(w) = 1"], (0, 1), unknowns=["y", "w"])
        sol = bvpkit.solve(p, tol=1e-9)
        assert sol.success, sol.message
        assert sol.evaluate("y(0)") == pytest.approx(1 / (1 - math.exp(-1)), rel=1e-8)  # analytic
    elif case == "singular centre":  # sphere: c'' + 2 c'/r = phi2 (c - ce), ce = c / 2: c = sinh(m r)/(r sinh m)
        p = bvpkit.Problem(["c'' + (2/r)*c' = phi2*(c - ce)", "0 = ce - c/2"], ["c'(0) = 0", "c(1) = 1"], (0, 1),
                           independent="r", unknowns=["c", "ce"], constants={"phi2": 8.0})
        sol = bvpkit.solve(p, tol=1e-9)
        assert sol.success, sol.message
        m = 2.0  # analytic: m**2 = phi2 / 2; c(0) = m / sinh(m)
        assert sol.evaluate("c(0)") == pytest.approx(m / math.sinh(m), rel=1e-7)
    else:  # van der Pol with w = u**2 as an algebraic unknown: the period 6.6632868593 at mu = 1
        p = bvpkit.Problem(["u'' - (1 - w)*u' + u = 0", "0 = w - u**2"], ["u(0) = u(T)", "u'(0) = u'(T)"], (0, "T"),
                           unknowns=["u", "w"], unknown_parameters={"T": 6.5}, guess={"u": "2*cos(2*pi*x/T)"})
        sol = bvpkit.solve(p, tol=1e-8)
        assert sol.success, sol.message
        # the period of the van der Pol oscillator at mu = 1 (from memory: 6.6632868593231)
        assert sol.parameters["T"] == pytest.approx(6.6632868593, rel=1e-6)


def test_arclength_continuation_round_a_fold_of_an_index_one_problem():
    # Bratu's problem with exp(y) as an algebraic unknown: the fold at lam = 3.513830719125
    # (from memory; the same fold bvpkit's own Bratu test checks)
    p = bvpkit.Problem(["y'' + lam*w = 0", "0 = w - exp(y)"], ["y(0) = 0", "y(1) = 0"], (0, 1), unknowns=["y", "w"],
                       constants={"lam": 3.0})
    branch = bvpkit.trace(p, "lam", start=3.0, stop=3.6, outputs=["w(1/2)"], tol=1e-8, return_to=3.2)
    assert branch.folds, "no fold found"
    assert branch.folds[0].parameter == pytest.approx(3.513830719125, rel=1e-7)


def test_a_sweep_carries_algebraic_outputs():
    result = bvpkit.sweep(exchanger(), {"h1": [1.0, 5.0]}, outputs=["Tw(0)"], workers=1)
    rows = {row["h1"]: row["Tw(0)"] for row in result.table}
    for h1, value in rows.items():
        assert value == pytest.approx(wall_at_inlet(2.0, 1.5, h1, 3.0), abs=1e-6)  # analytic, above


@settings(max_examples=scaled_examples(0.12))
@given(index_one_problems())
def test_drawn_index_one_problems_meet_their_exact_solutions(case):
    sol = bvpkit.solve(case.problem, tol=1e-8)
    assert_matches_exact(sol, case)
    assert_solves(case.problem, sol)


def test_a_method_that_does_not_take_algebraic_equations_is_refused_before_it_runs():
    from bvpkit.methods.base import Method, Trial

    class Plain(Method):  # a method that declares nothing it takes
        name = "plain"

        def _solve(self, trial):  # pragma: no cover - must not run
            raise AssertionError("ran")

    prepared = bvpkit.prepare(exchanger())
    compiled = prepared.compiled
    assert "algebraic" in compiled.needs
    t = np.linspace(0, 1, 5)
    outcome = Plain().solve(Trial(compiled, t, np.zeros((2, 5)), np.zeros(0), prepared.k(), 1e-6))
    assert not outcome.ok and "cannot take algebraic equations beside the differential ones" in outcome.message
    assert all("algebraic" in method.takes for method in bvpkit.methods.REGISTRY.values())


def test_tracing_reads_no_stability_into_an_index_one_problem():
    p = bvpkit.Problem(["y'' + lam*w = 0", "0 = w - exp(y)"], ["y(0) = 0", "y(1) = 0"], (0, 1), unknowns=["y", "w"],
                       constants={"lam": 0.5})
    branch = bvpkit.trace(p, "lam", start=0.5, stop=1.0, outputs=["w(1/2)"], stability=True, max_points=6)
    # u_t = u'' - g does not describe an algebraic equation's evolution: not judged
    assert all(s is None for s in branch.stability)


def test_a_condition_that_repeats_what_the_algebraic_equation_fixes_is_said():
    # z = y1, so y1(1) = 1 and z(1) = 2 fix the same value twice (and contradict each other)
    p = bvpkit.Problem(["y1' = y2", "y2' = -y1 + z", "0 = z - y1"], ["y1(1) = 1", "z(1) = 2"], (0, 1),
                       unknowns=["y1", "y2", "z"])
    sol = bvpkit.solve(p, method="collocation")
    assert not sol.success
    assert "over-determine" in sol.message and "'z(1) = 2'" in sol.message
