"""Solving what a practitioner types, from no guess: continuation from an easier problem, weak
end singularities, tolerances below round-off, warnings about nearly singular problems,
a value with no solution, and the selector's time budget."""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy.special import erf

import bvpkit
from bvpkit.errors import OptionError
from bvpkit.io.cli import main
from bvpkit.status import Status

ROOT = Path(__file__).resolve().parents[1]


# -- continuation from an easier problem --------------------------------------------------------
def test_blasius_on_a_finite_domain_from_the_default_guess():
    # The default guess f = x^2/24 sends Newton to a spurious reversed-flow iterate on [0, 12];
    # auto continues from the problem without its nonlinear term and lands on the solution.
    p = bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", "f'(12) = 1"], (0, 12))
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success and sol.method == "collocation", sol.message
    # f''(0) = 0.3320573362 (Boyd 1999; truncation at 12 costs about 1e-10)
    assert sol.evaluate("f''(0)") == pytest.approx(0.3320573362, abs=2e-9)
    assert "continu" in sol.diagnostics.selection and "nonlinear terms" in sol.diagnostics.selection


def test_continuation_can_be_named_from_python_a_spec_and_the_command_line(tmp_path, capsys):
    eps = 1e-4

    # 1 + eps log cosh((x - 0.745)/eps), written without overflow (Cash test set, problem 20; from memory)
    def exact(x):
        z = np.abs((x - 0.745) / eps)
        return 1 + eps * (z + np.log1p(np.exp(-2 * z)) - math.log(2))

    conditions = ["y(0) = 1.745 + eps*log((1 + exp(-1.49/eps))/2)",
                  "y(1) = 1.255 + eps*log((1 + exp(-0.51/eps))/2)"]
    p = bvpkit.Problem(["eps*y'' + y'**2 = 1"], conditions, (0, 1), constants={"eps": eps})
    sol = bvpkit.solve(p, tol=1e-6, homotopy="eps")
    assert sol.success, sol.message
    assert sol.diagnostics.attempts[0].reason.startswith("continuation in eps asked for by name")
    x = np.linspace(0, 1, 20001)
    assert np.max(np.abs(sol.evaluate("y", at=x) - exact(x)) / (1 + exact(x))) < 1e-5
    # the same from a Problem setting, a spec's [solver] and --homotopy
    assert bvpkit.solve(bvpkit.Problem(["eps*y'' + y'**2 = 1"], conditions, (0, 1), constants={"eps": eps},
                                       settings={"homotopy": "eps"}), tol=1e-6).success
    spec = tmp_path / "corner.toml"
    spec.write_text(
        "[problem]\ndomain = [0, 1]\nequations = [\"eps*y'' + y'**2 = 1\"]\n"
        "conditions = [" + ", ".join(f'"{c}"' for c in conditions) + "]\n"
        f"constants = {{ eps = {eps} }}\n[solver]\nhomotopy = \"eps\"\ntol = 1e-6\n")
    assert main(["solve", str(spec), "--json"]) == 0
    assert '"success": true' in capsys.readouterr().out
    assert main(["solve", str(spec), "--homotopy", "lambda", "--json"]) == Status.BAD_INPUT.exit_code
    assert "not a constant of the problem" in capsys.readouterr().out
    with pytest.raises(OptionError, match="not a constant of the problem"):
        bvpkit.solve(p, homotopy="epsilon")


def test_bratu_beyond_its_fold_says_there_may_be_no_solution():
    # y'' + lam exp(y) = 0, y(0) = y(1) = 0 has no solution above its fold at lam = 3.51383071912516
    # (analytic: y = -2 log(cosh((x - 1/2) th/2) / cosh(th/4)) with th = sqrt(2 lam) cosh(th/4))
    p = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 5.0})
    sol = bvpkit.solve(p, time_limit=30)  # the probe runs in what is left of the budget: ample here
    assert not sol.success
    assert "may have no solution for lam = 5" in sol.message and "bvpkit trace" in sol.message
    assert "layer" not in sol.message.split("(what was seen")[0]
    fold = float(sol.message.split("fold at lam = ")[1].split(",")[0])
    assert fold == pytest.approx(3.51383071912516, rel=1e-6)


@pytest.mark.slow  # every step fails: it spends the whole default budget of 8 s
def test_a_true_thin_layer_at_the_mesh_limit_still_says_layer():
    # a viscous shock of width ~1e-5 cannot be resolved on 300 nodes: a layer, not a missing solution
    p = bvpkit.Problem(["eps*y'' + y*y' = 0"], ["y(0) = 1", "y(1) = -1"], (0, 1), constants={"eps": 1e-5})
    sol = bvpkit.solve(p, max_nodes=300)
    assert sol.status is Status.MESH_LIMIT
    assert "thin layer" in sol.message and "may have no solution" not in sol.message


def test_default_guess_is_moved_into_the_domain_of_log():
    # y'' = log(y/2) with y'(0) = y'(1) = 0: exact y = 2 (analytic); the default guess y = 0
    # is outside the domain of log
    p = bvpkit.Problem(["y'' = log(y) - log(2)"], ["y'(0) = 0", "y'(1) = 0"], (0, 1))
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    assert sol.evaluate("y(0.3)") == pytest.approx(2.0, abs=1e-7)


def test_overflow_along_the_guess_points_to_continuation():
    p = bvpkit.Problem(["y'' = exp(y**2)"], ["y(0) = 0", "y(1) = 40"], (0, 1))
    sol = bvpkit.solve(p, method="collocation")
    assert sol.status is Status.NON_FINITE
    assert "overflow" in sol.message and "homotopy" in sol.message and "log and sqrt" not in sol.message


# -- weak end singularities ------------------------------------------------------------------------
def test_thomas_fermi_as_written():
    p = bvpkit.Problem(["y'' = y**(3/2)/sqrt(x)"], ["y(0) = 1", "y(inf) = 0"], (0, "inf"))
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    # y'(0) = -1.588071022611375 (Kobayashi et al. 1955 give -1.588071; 16 digits from Amore,
    # Boyd and Fernandez 2012)
    assert sol.evaluate("y'(0)") == pytest.approx(-1.588071022611375, abs=1e-7)
    assert "infinity placed at x = " in sol.message  # the truncation says how far it went
    assert sol.diagnostics.truncation_length > 100


def test_an_inverse_square_root_at_the_left_end_is_stretched_away():
    # y'' = 3/(4 sqrt(x)), y(0) = 0, y(1) = 1: exact y = x^(3/2) (analytic)
    p = bvpkit.Problem(["y'' = 3/(4*sqrt(x))"], ["y(0) = 0", "y(1) = 1"], (0, 1))
    assert bvpkit.prepare(p).layout.stretch == (2,)
    sol = bvpkit.solve(p, tol=1e-9)
    assert sol.success, sol.message
    x = np.array([0.0, 0.01, 0.25, 0.7, 1.0])
    assert sol.evaluate("y", at=x) == pytest.approx(x**1.5, abs=1e-8)
    assert sol.evaluate("y'", at=x) == pytest.approx(1.5 * np.sqrt(x), abs=1e-7)
    assert sol.integrate("y") == pytest.approx(0.4, abs=1e-8)  # analytic: integral of x^(3/2) over [0, 1]
    assert sol.x[0] == 0.0 and sol.x[-1] == pytest.approx(1.0) and np.all(np.diff(sol.x) > 0)


# -- layers to 1e-7 against exact solutions ---------------------------------------------------------
def test_interior_layer_at_eps_1e_minus_6():
    eps = 1e-6
    p = bvpkit.Problem(["eps*y'' + x*y' = 0"], ["y(-1) = -1", "y(1) = 1"], (-1, 1), constants={"eps": eps})
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    x = np.concatenate([np.linspace(-1, 1, 20001), np.linspace(-2e-2, 2e-2, 20001)])
    exact = erf(x / math.sqrt(2 * eps)) / erf(1 / math.sqrt(2 * eps))  # analytic
    assert np.max(np.abs(sol.evaluate("y", at=x) - exact)) < 1e-7


def test_two_layers_at_eps_1e_minus_8():
    eps = 1e-8
    d = math.sqrt(eps)
    p = bvpkit.Problem(["eps*y'' - y = 0"], ["y(0) = 1", "y(1) = 1"], (0, 1), constants={"eps": eps})
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    x = np.concatenate([np.linspace(0, 1, 20001), np.linspace(0, 1e-3, 2001), np.linspace(1 - 1e-3, 1, 2001)])
    # analytic: cosh((x - 1/2)/d) / cosh(1/(2 d)), written without overflow
    exact = (np.exp(-x / d) + np.exp((x - 1) / d)) / (1 + math.exp(-1 / d))
    assert np.max(np.abs(sol.evaluate("y", at=x) - exact)) < 1e-7


# -- tolerances below round-off ----------------------------------------------------------------------
def test_pin_fin_at_tol_1e_minus_12_never_hits_the_mesh_limit():
    p = bvpkit.Problem(["T'' = m**2*T"], ["T(0) = 1", "T'(1) = 0"], (0, 1), constants={"m": 2.0})
    sol = bvpkit.solve(p, tol=1e-12)
    assert sol.status in (Status.SOLVED, Status.PRECISION_LIMIT), sol.message
    x = np.linspace(0, 1, 101)
    exact = np.cosh(2 * (1 - x)) / np.cosh(2)  # analytic
    true = np.max(np.abs(sol.evaluate("T", at=x, allow_failed=True) - exact) / (1 + exact))
    assert true <= 10 * max(1e-12, sol.diagnostics.error_estimate)


def test_collocation_stops_refining_at_the_round_off_floor():
    # our pin fin spec at tol 1e-10: the residual of its theta near the tip stops at about 2e-10
    # from rounding; refining further once hit the mesh limit with "a thin layer?"
    p = bvpkit.load(ROOT / "specs/pin_fin.toml")
    sol = bvpkit.solve(p, tol=1e-10, method="collocation")
    assert sol.status in (Status.SOLVED, Status.PRECISION_LIMIT), sol.message
    assert sol.diagnostics.mesh_nodes < 5000
    m2, length = 4 * 40.0 / (200.0 * 0.005), 0.08
    m = math.sqrt(m2)
    x = np.linspace(0, length, 41)
    exact = 45.0 * np.cosh(m * (length - x)) / math.cosh(m * length)  # analytic: insulated tip
    true = np.max(np.abs(sol.evaluate("theta", at=x, allow_failed=True) - exact) / (1 + exact))
    assert true <= 10 * max(1e-10, sol.diagnostics.error_estimate)


def test_a_tolerance_below_what_double_precision_allows_is_reported_with_the_accuracy_reached():
    # y'' + k^2 y = 0 close to resonance (k = 3.1415): stability constant ~1e5, so round-off alone
    # moves the solution by ~2e-11 > tol; exact y = sin(k x)/sin(k) (analytic)
    k = 3.1415
    p = bvpkit.Problem(["y'' + k**2*y = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1), constants={"k": k})
    sol = bvpkit.solve(p, tol=1e-12)
    assert sol.status is Status.PRECISION_LIMIT and not sol.success
    assert "tolerance below what double precision allows here" in sol.message
    reached = sol.diagnostics.error_estimate
    assert 1e-12 < reached < 1e-9
    x = np.linspace(0, 1, 11)
    exact = np.sin(k * x) / math.sin(k)
    true = np.max(np.abs(sol.evaluate("y", at=x, allow_failed=True) - exact) / (1 + np.abs(exact)))
    assert true <= 10 * reached
    # no method can do better: nothing is tried after the precision limit is found (at this
    # tolerance the selector's cost model tries the sixth order first; it converges and finds
    # the limit itself, or stalls at round-off and the fourth order takes over)
    methods = [a.method for a in sol.diagnostics.attempts]
    assert methods[0] == "collocation6" and set(methods) <= {"collocation6", "collocation"}
    assert len(methods) == len(set(methods))


# -- nearly singular problems ---------------------------------------------------------------------
def test_a_homogeneous_problem_at_an_eigenvalue_is_a_warning_not_plain_success(tmp_path, capsys):
    # y'' + pi^2 y = 0, y(0) = y(1) = 0: every multiple of sin(pi x) solves it (analytic)
    p = bvpkit.Problem(["y'' + pi**2*y = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1))
    sol = bvpkit.solve(p)
    assert sol.status is Status.NEARLY_SINGULAR and sol.success
    assert "homogeneous" in sol.message and "normalisation" in sol.message
    spec = tmp_path / "resonant.toml"
    spec.write_text("[problem]\ndomain = [0, 1]\nequations = [\"y'' + pi**2*y = 0\"]\n"
                    "conditions = [\"y(0) = 0\", \"y(1) = 0\"]\n")
    assert main(["solve", str(spec)]) == Status.NEARLY_SINGULAR.exit_code == 11
    capsys.readouterr()


def test_a_resonance_and_a_fold_are_named():
    near = bvpkit.solve(bvpkit.Problem(["y'' + k**2*y = 1"], ["y(0) = 0", "y(1) = 0"], (0, 1),
                                       constants={"k": 2 * math.pi * (1 - 1e-9)}), tol=1e-6)
    assert near.status is Status.NEARLY_SINGULAR and "resonance" in near.message
    # y'' + lam sin(y) = 0, y(0) = y(1) = 0 at lam = pi^2: the zero solution, at the branch point
    # where the non-zero ones branch off (analytic: the linearisation y'' + pi^2 y = 0 is singular)
    branching = bvpkit.Problem(["y'' + lam*sin(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1),
                               constants={"lam": math.pi**2})
    sol = bvpkit.solve(branching)
    assert sol.success and sol.status is Status.NEARLY_SINGULAR
    assert "fold or branch point" in sol.message and "bvpkit trace" in sol.message


def test_well_posed_layers_are_not_flagged():
    sol = bvpkit.solve(bvpkit.Problem(["eps*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1),
                                      constants={"eps": 1e-4}), tol=1e-4)
    assert sol.status is Status.SOLVED, sol.message


# -- the selector's budget and order -----------------------------------------------------------------
def test_a_slow_attempt_yields_when_its_share_of_the_budget_is_spent():
    p = bvpkit.Problem(["eps*y'' - x*y' + y = 0"], ["y(-1) = 1", "y(1) = 2"], (-1, 1),
                       constants={"eps": 1e-2})
    sol = bvpkit.solve(p, tol=1e-7, method="multiple_shooting", time_limit=0.01)
    assert not sol.success
    assert "time budget" in sol.message
    with pytest.raises(OptionError, match="time_limit must be a positive number"):
        bvpkit.solve(p, time_limit=0)


def test_collocation_goes_first_and_an_ill_conditioned_convergence_ends_the_search():
    # the twin-layer problem at eps = 1e-2: stability constant ~1e17, so no method can give 1e-7
    p = bvpkit.Problem(["eps*y'' - x*y' + y = 0"], ["y(-1) = 1", "y(1) = 2"], (-1, 1),
                       constants={"eps": 1e-2})
    sol = bvpkit.solve(p, tol=1e-7)
    assert not sol.success
    assert [a.method for a in sol.diagnostics.attempts] == ["collocation"]
    assert "no other method was tried" in sol.diagnostics.selection


# -- honesty on the test set (untimed; the timed run is benchmarks/testset.py) ------------------------
_HONEST = ["nonlinear_corner-eps1e-3", "viscous_shock-eps5e-2", "turning_point_resonance-eps1e-3",
           "reaction_two_layers-eps1e-4", "bratu-lam3", "quadratic_two_solutions"]


@pytest.mark.parametrize("name", _HONEST)
@pytest.mark.parametrize("tol", [1e-4, 1e-7])
def test_auto_claims_no_false_success_on_test_set_instances(name, tol):
    sys.path.insert(0, str(ROOT))
    from benchmarks.testset_instances import BY_NAME

    inst = BY_NAME[name]
    p = bvpkit.Problem(list(inst.equations), list(inst.conditions), inst.domain,
                       constants=dict(inst.constants))
    sol = bvpkit.solve(p, tol=tol)
    if sol.success:
        x = np.linspace(*inst.domain, 20001)
        exact = inst.exact(x)
        true = float(np.max(np.abs(sol.evaluate(inst.unknown, at=x) - exact) / (1 + np.abs(exact))))
        assert true <= 10 * tol, (sol.message, true)
        assert true <= 10 * sol.diagnostics.error_estimate + 1e-13, (sol.message, true)


# -- the paths of continuation, one by one -------------------------------------------------------
@pytest.mark.parametrize("which", ["_homotopy", "_reach"])
def test_each_path_reaches_blasius_on_a_finite_domain(which):
    from bvpkit.methods.base import Trial
    from bvpkit.solver import driver, homotopy, start

    problem = bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", "f'(12) = 1"], (0, 12))
    prepared = bvpkit.prepare(problem)
    chosen = driver.options({}, {"tol": 1e-8})
    k = prepared.k()
    t, y, p = start.initial(prepared, k, None, chosen)
    trial = Trial(prepared.compiled, t, y, p, k, 1e-8, 20_000, True)
    paths = {path.name: path for path in homotopy.paths(prepared, None, trial)}
    assert set(paths) == {"_homotopy", "_reach"}  # nonlinear, and a far-field condition f'(12) = 1
    assert paths["_reach"].start == pytest.approx(1 / 12)  # from a domain of unit length
    outcome, how = homotopy.follow(prepared, paths[which], trial)
    assert outcome.ok and int(how.split()[0]) >= 3, outcome.message
    sol = driver.settle(prepared, driver.Run(outcome, k, [], "", 1e-8), 0.0)
    assert sol.evaluate("f''(0)") == pytest.approx(0.3320573362, abs=2e-9)  # Boyd 1999, as above


def test_a_named_path_that_turns_twice_is_followed_around_its_folds():
    # y'' + lam exp(y/(1 + y/6)) = 0, y(0) = y(1) = 0: an S-shaped family in lam (ignition near
    # lam = 4.37, extinction near 1.98, seen by bvpkit.trace); at lam = 6 only the hot branch is
    # left, so natural steps in lam from 0 stop at the first fold and the trace goes round both
    p = bvpkit.Problem(["y'' + lam*exp(y/(1 + y/g)) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1),
                       constants={"lam": 6.0, "g": 6.0})
    named = bvpkit.solve(p, homotopy="lam", tol=1e-6, time_limit=60)  # a budget no shared machine misses
    assert named.success, named.message
    assert "around a turn" in named.message
    hot = named.evaluate("y(1/2)")
    assert hot > 100  # the hot branch
    # the same solution by the default path (the nonlinear terms scaled), and the equation met
    # by the solution's own interpolant (common practice, no source)
    other = bvpkit.solve(p, tol=1e-6)
    assert other.success and other.evaluate("y(1/2)") == pytest.approx(hot, rel=1e-5)
    x = np.linspace(0.05, 0.95, 19)
    h = 1e-4
    second = (named.evaluate("y'", at=x + h) - named.evaluate("y'", at=x - h)) / (2 * h)
    y = named.evaluate("y", at=x)
    assert np.max(np.abs(second + 6.0 * np.exp(y / (1 + y / 6.0)))) < 1e-3 * np.max(np.abs(second))


def test_a_mesh_limit_at_a_tight_tolerance_calls_the_higher_order_next():
    # van der Pol's limit cycle at mu = 1, tol 1e-11: the fourth order meets the mesh limit with
    # Newton converged on every mesh; continuation from the linear oscillator then ended on the
    # resting state (period undetermined) and the solve gave up with "ill-conditioned". The sixth
    # order, tried next, needs about 5,000 nodes. (At 1e-11 the cost model now picks the sixth
    # order first; at 1e-10 the fourth goes first and needs 9,607 nodes, the sixth 3,427 and its
    # halved mesh: a limit of 8,000 takes the same path.)
    p = bvpkit.Problem(["u'' - mu*(1 - u**2)*u' + u = 0"], ["u(0) = u(T)", "u'(0) = u'(T)"], (0, "T"),
                       constants={"mu": 1.0}, unknown_parameters={"T": 6.5}, guess={"u": "2*cos(2*pi*x/T)"})
    tight = bvpkit.solve(p, tol=1e-11)
    assert tight.success, tight.message
    assert tight.parameters["T"] == pytest.approx(6.6632868593, abs=1e-9)  # from memory, as below
    sol = bvpkit.solve(p, tol=1e-10, max_nodes=8000)
    assert sol.success, sol.message
    assert [a.method for a in sol.diagnostics.attempts] == ["collocation", "collocation6"]
    assert sol.diagnostics.attempts[0].status == Status.MESH_LIMIT.word
    assert "higher order" in sol.diagnostics.attempts[1].reason
    # the period of van der Pol's cycle at mu = 1: 6.6632868593 (from memory; our tol 1e-10 solve agrees)
    assert sol.parameters["T"] == pytest.approx(6.6632868593, abs=1e-9)


def test_a_continuation_that_lands_on_a_singular_solution_does_not_end_the_search():
    # van der Pol at mu = 3 from a circle: Newton fails from the guess, and continuation from the
    # linear oscillator lands on the resting state u = 0, where the period is undetermined (stability
    # constant ~1e47). That was reported as an ill-conditioned problem; the other methods go on and
    # multiple shooting finds the cycle.
    p = bvpkit.Problem(["u'' - mu*(1 - u**2)*u' + u = 0"], ["u(0) = u(T)", "u'(0) = u'(T)"], (0, "T"),
                       constants={"mu": 3.0}, unknown_parameters={"T": 8.0}, guess={"u": "2*cos(2*pi*x/T)"})
    sol = bvpkit.solve(p, tol=1e-6)
    assert sol.status is bvpkit.Status.SOLVED, sol.message
    # the period of van der Pol's cycle at mu = 3: 8.8591 (from memory)
    assert sol.parameters["T"] == pytest.approx(8.8591, abs=2e-4)
    assert any(a.status == "singular_jacobian" and "resting state" in a.message for a in sol.diagnostics.attempts)


def test_a_residual_at_its_round_off_floor_calls_the_higher_order_next():
    # mode 5 of y'' + lam y = 0 at tol 1e-10: the fourth order's residual reaches its round-off
    # floor on ~14,000 nodes (precision_limit); that verdict ended the search, but the sixth order
    # meets the tolerance on far fewer nodes. analytic: lam = 25 pi^2
    p = bvpkit.Problem(["y'' + lam*y = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), eigenvalue="lam", mode=5)
    sol = bvpkit.solve(p, tol=1e-10)
    assert sol.success, sol.message
    assert sol.parameters["lam"] == pytest.approx(25 * math.pi**2, abs=1e-8)
    assert sol.diagnostics.attempts[-1].method == "collocation6"
