"""The one standard form: multipoint problems, classes in combination, continuation of every class.

Each check value has its source beside it.
"""

import math

import numpy as np
import pytest
import scipy.special as special

import bvpkit
from bvpkit import OptionError, ProblemError

# -- multipoint problems ------------------------------------------------------------------

Q, SPAN, EI = 1.8e3, 0.9, 4.2e3  # our own demo shelf: N/m, m, N m^2


def two_spans():
    # w upward, load q downward: EI w'''' = -q; the middle support's reaction R (upward) is the
    # jump of the shear EI w''' there, an unknown parameter of the problem
    return bvpkit.Problem(
        ["EI*w'''' = -q"],
        ["w(0) = 0", "w''(0) = 0", "w(2*L) = 0", "w''(2*L) = 0", "w(L) = 0", "EI*(w'''(L+) - w'''(L-)) = R"],
        (0, "2*L"), constants={"q": Q, "L": SPAN, "EI": EI}, unknown_parameters={"R": 1.0},
    )


def test_two_equal_spans_reactions_and_moment_over_the_middle_support():
    sol = bvpkit.solve(two_spans(), tol=1e-10)
    assert sol.success, sol.message
    # analytic (three-moment equation): middle reaction 5qL/4, end reactions 3qL/8, moment
    # over the middle support -qL^2/8 (hogging)
    assert sol.parameters["R"] == pytest.approx(5 * Q * SPAN / 4, rel=1e-9)
    assert sol.evaluate("EI*w'''(0)") == pytest.approx(3 * Q * SPAN / 8, rel=1e-9)
    assert sol.evaluate("-EI*w'''(2*L)") == pytest.approx(3 * Q * SPAN / 8, rel=1e-9)
    assert sol.evaluate("EI*w''(L)") == pytest.approx(-Q * SPAN**2 / 8, rel=1e-9)
    # the shear jumps at the support, the slope does not
    assert sol.evaluate("w'(L-)") == pytest.approx(sol.evaluate("w'(L+)"), abs=1e-12)
    assert sol.evaluate("EI*(w'''(L+) - w'''(L-))") == pytest.approx(5 * Q * SPAN / 4, rel=1e-9)


K1, K2, A, B, R_CONTACT, T_HOT, T_COLD = 1.4, 0.16, 0.23, 0.11, 0.02, 1150.0, 320.0  # our own furnace wall


def test_two_layer_wall_with_a_contact_resistance():
    # the flux q as a state, T' = -q/k with k a constant of each region's own; T jumps by R q
    p = bvpkit.Problem(
        ["T' = -q/k", "q' = 0"],
        ["T(0) = T_hot", "T(a + b) = T_cold", "T(a-) - T(a+) = R*q(a)"],
        (0, "a + b"), independent="x",
        constants={"k": K1, "a": A, "b": B, "R": R_CONTACT, "T_hot": T_HOT, "T_cold": T_COLD},
        regions=[{"end": "a", "constants": {"k": K1}}, {"constants": {"k": K2}}],
    )
    sol = bvpkit.solve(p, tol=1e-10)
    assert sol.success, sol.message
    # analytic: series resistances, q = (T0 - T1) / (a/k1 + R + b/k2)
    flux = (T_HOT - T_COLD) / (A / K1 + R_CONTACT + B / K2)
    assert sol.evaluate("q(0)") == pytest.approx(flux, rel=1e-9)
    assert sol.evaluate("T(a-) - T(a+)") == pytest.approx(R_CONTACT * flux, rel=1e-9)
    assert sol.evaluate("T(a-)") == pytest.approx(T_HOT - flux * A / K1, rel=1e-9)


def test_a_region_with_equations_of_its_own():
    # a catalyst slab with an inert coat: c'' = phi^2 c on [0, a], c'' = 0 on [a, 1], c'(0) = 0,
    # c(1) = 1, c and c' continuous at a. Analytic: c = A cosh(phi x) inside,
    # A = 1 / (cosh(phi a) + phi sinh(phi a) (1 - a))
    phi, a = 3.0, 0.7
    p = bvpkit.Problem(["c'' = phi**2*c"], ["c'(0) = 0", "c(1) = 1"], (0, 1), constants={"phi": phi, "a": a},
                       regions=[{"end": "a"}, {"equations": ["c'' = 0"]}])
    sol = bvpkit.solve(p, tol=1e-10)
    assert sol.success, sol.message
    amplitude = 1 / (math.cosh(phi * a) + phi * math.sinh(phi * a) * (1 - a))
    assert sol.evaluate("c(0)") == pytest.approx(amplitude, rel=1e-9)
    assert sol.evaluate("c'(a)") == pytest.approx(amplitude * phi * math.sinh(phi * a), rel=1e-9)
    x = np.array([0.85, 0.95])
    assert sol.evaluate("c", at=x) == pytest.approx(1 - amplitude * phi * math.sinh(phi * a) * (1 - x), rel=1e-9)


def test_a_multipoint_problem_from_a_spec_and_the_command_line(tmp_path, capsys):
    from bvpkit.io.cli import main

    spec = tmp_path / "shelf.toml"
    spec.write_text(
        'title = "two spans"\n[problem]\ndomain = [0, "2*L"]\nequations = ["EI*w\'\'\'\' = -q"]\n'
        'conditions = ["w(0) = 0", "w\'\'(0) = 0", "w(2*L) = 0", "w\'\'(2*L) = 0", "w(L) = 0", '
        '"EI*(w\'\'\'(L+) - w\'\'\'(L-)) = R"]\n'
        f"constants = {{ q = {Q}, L = {SPAN}, EI = {EI} }}\nunknown_parameters = {{ R = 1.0 }}\n"
        '[outputs]\nmoment_over_support = "EI*w\'\'(L)"\n'
    )
    assert main(["check", str(spec)]) == 0
    out = capsys.readouterr().out
    assert "3 of continuity at interfaces" in out and "region 2" in out
    assert main(["solve", str(spec), "--json"]) == 0
    import json

    report = json.loads(capsys.readouterr().out)
    assert report["parameters"]["R"] == pytest.approx(5 * Q * SPAN / 4, rel=1e-7)  # analytic, as above
    assert report["outputs"]["moment_over_support"] == pytest.approx(-Q * SPAN**2 / 8, rel=1e-7)


@pytest.mark.parametrize(("kwargs", "error", "words"), [
    (dict(conditions=["y(0) = 0", "y(3/2) = 1"]), ProblemError, "lies outside the domain"),
    (dict(conditions=["y(0) = 0", "y(1/2-) = 1"]), ProblemError, r"1 at x = 1/2, where y jumps"),
    (dict(conditions=["y(0) = 0", "y(1) = 0", "y(1+) = 1"]), ProblemError, "no value from the right there"),
    (dict(regions=[{"end": 0.7}, {"end": 0.3}, {}]), ProblemError, "must be in increasing order"),
    (dict(regions=[{"end": 0.7}, {"end": 0.3}]), ProblemError, "is the last region"),
    (dict(regions=[{"end": 0.7}, {"equations": ["y' = 1"]}]), ProblemError, "same unknown functions of the same orders"),
    (dict(regions=[{"end": 0.7}, {"constants": {"zz": 1.0}}]), ProblemError, "'zz' is not a constant"),
    (dict(regions=[{"end": 0.7}, {"size": 2}]), ProblemError, "unknown key 'size'"),
    (dict(regions=[{"end": 1.5}, {}]), ProblemError, "x = 1.5, where a condition takes a value .*lies outside"),
    (dict(regions=[{"end": 0.6}, {"end": 0.4}, {}]), ProblemError, "must be in increasing order"),
    (dict(conditions=["y(0) = 0", "y(1/2) = 1", "y'(1/2-) = 2", "y(1/2+) = 0"]), ProblemError, "ambiguous"),
    (dict(equations=["y'' + y/(x - 1/2) = 0"], regions=[{"end": 0.5}, {}]), ProblemError, "singular at an interface"),
])
def test_bad_multipoint_input_is_one_clear_error(kwargs, error, words):
    arguments = dict(equations=["y'' = -y"], conditions=["y(0) = 0", "y(1) = 1"], domain=(0, 1))
    arguments.update(kwargs)
    with pytest.raises(error, match=words):
        bvpkit.Problem(**arguments)


def test_a_term_singular_at_the_right_end_is_refused_with_what_to_do():
    with pytest.raises(ProblemError, match="singular at the right end .*reverse the direction of z"):
        bvpkit.Problem(["u'' + (2/(1 - z))*u' = 0"], ["u'(1) = 0", "u(0) = 2"], (0, 1), independent="z")


# -- classes in combination ----------------------------------------------------------------

@pytest.mark.parametrize(("n", "start", "guess", "first_zero", "source"), [
    (1, 3.0, None, math.pi, "analytic: u = sin z / z"),
    (1.5, 3.6, None, 3.65375373621912608, "Boyd 2011, high-accuracy Lane-Emden zeros (from memory)"),
    (4, 15.0, "(1 - (z/s)**2)/(1 + z**2/6)", 14.971546348838095098,
     "Boyd 2011, high-accuracy Lane-Emden zeros (from memory)"),
])
def test_polytrope_first_zero_as_a_singular_centre_with_a_free_end(n, start, guess, first_zero, source):
    p = bvpkit.Problem(["u'' + (2/z)*u' + u**n = 0"], ["u(0) = 1", "u'(0) = 0", "u(s) = 0"], (0, "s"),
                       independent="z", constants={"n": n}, unknown_parameters={"s": start},
                       guess={"u": guess} if guess else None)
    sol = bvpkit.solve(p, tol=1e-10)
    assert sol.success, sol.message
    assert sol.parameters["s"] == pytest.approx(first_zero, rel=1e-8), source
    assert bvpkit.prepare(p).layout.singular


@pytest.mark.parametrize("k", [1, 2, 3])
def test_airy_eigenvalues_on_an_infinite_domain(k):
    p = bvpkit.Problem(["y'' = (x - lam)*y"], ["y(0) = 0", "y(inf) = 0"], (0, "inf"), eigenvalue="lam", mode=k)
    sol = bvpkit.solve(p, tol=1e-10)
    assert sol.success, sol.message
    # the zeros of Ai: y = Ai(x - lam) (scipy.special.ai_zeros)
    assert sol.parameters["lam"] == pytest.approx(-special.ai_zeros(k)[0][k - 1], rel=1e-9)
    assert sol.diagnostics.truncation_length >= 10


def test_frank_kamenetskii_sphere_fold_by_pseudo_arclength():
    p = bvpkit.Problem(["y'' + (2/r)*y' + lam*exp(y) = 0"], ["y'(0) = 0", "y(1) = 0"], (0, 1), independent="r",
                       constants={"lam": 1.0})
    branch = bvpkit.trace(p, "lam", start=2.5, stop=3.5, outputs=["y(0)"], tol=1e-8)
    assert len(branch.folds) == 1, branch.message
    # Frank-Kamenetskii's critical value for the sphere, 3.32; the digits by an independent
    # shooting from the centre (the series y = -lam r^2/6 + ..., integrated with scipy's
    # solve_ivp at rtol 1e-13, the fold the maximum of lam over the centre value)
    assert branch.folds[0].parameter == pytest.approx(3.32199211834, rel=1e-7)
    assert "arclength" in branch.steps


def _fk_sphere_fold_by_shooting() -> float:
    """The sphere's critical value by shooting from the centre, independently of bvpkit: with
    y(r) = theta(r sqrt(lam)) - ... the scaling u(s) = y + log(lam)... (Emden-Chandrasekhar form)."""
    from scipy.integrate import solve_ivp
    from scipy.optimize import minimize_scalar

    def lam_of(centre: float) -> float:
        # z'' + 2 z'/s + exp(z) = 0, z(0) = 0, z'(0) = 0; then y(r) = z(r sqrt(lam e^c)) + c with
        # y(1) = 0 fixing lam: lam = S^2 e^{-c}, where z(S) = -c
        def reach(s, v):
            return v[0] + centre

        reach.terminal = True
        start = 1e-6
        v0 = [-start**2 / 6, -start / 3]
        done = solve_ivp(lambda s, v: [v[1], -2 * v[1] / s - math.exp(v[0])], (start, 50), v0, events=reach,
                         rtol=1e-13, atol=1e-14)
        edge = done.t_events[0][0]
        return edge**2 * math.exp(-centre)

    best = minimize_scalar(lambda c: -lam_of(c), bounds=(0.5, 3.0), method="bounded",
                           options={"xatol": 1e-10})
    return -best.fun


def test_the_sphere_fold_value_by_independent_shooting():
    # the check value of the test above, recomputed here so it is not taken on trust
    assert _fk_sphere_fold_by_shooting() == pytest.approx(3.32199211834, rel=1e-8)


# -- continuation accepts every class -----------------------------------------------------

def test_trace_a_free_end_problem():
    # the length s of a fin whose tip reaches theta = 1/2: theta'' = m^2 theta, theta(0) = 1,
    # theta'(s) = 0 (insulated tip), theta(s) = 1/2; analytic: cosh(m s) = 2, s = acosh(2)/m
    p = bvpkit.Problem(["theta'' = m**2*theta"], ["theta(0) = 1", "theta'(s) = 0", "theta(s) = 1/2"], (0, "s"),
                       constants={"m": 2.0}, unknown_parameters={"s": 0.5})
    branch = bvpkit.trace(p, "m", start=2.0, stop=5.0, outputs=["s"], tol=1e-8)
    assert branch.success, branch.message
    assert branch.outputs["s"] == pytest.approx(np.arccosh(2) / branch.parameter, rel=1e-7)


def test_trace_a_multipoint_problem():
    branch = bvpkit.trace(two_spans(), "q", start=1e3, stop=3e3, outputs=["R"], tol=1e-8)
    assert branch.success, branch.message
    assert branch.outputs["R"] == pytest.approx(5 * branch.parameter * SPAN / 4, rel=1e-7)  # analytic, as above


def test_a_constant_that_is_not_one_is_refused_by_trace():
    with pytest.raises(OptionError, match="not a constant"):
        bvpkit.trace(two_spans(), "R", start=1, stop=2)


def test_a_trace_whose_bordered_matrix_turns_singular_ends_with_a_message():
    # the polytrope's index as the traced constant: u**n is not smooth where u reaches 0 at the
    # free end (and NaN beyond it), and an arclength step there once met an exactly singular
    # bordered matrix, which escaped as SuperLU's RuntimeError
    p = bvpkit.Problem(["u'' + (2/z)*u' + u**n = 0"], ["u(0) = 1", "u'(0) = 0", "u(s) = 0"], (0, "s"),
                       independent="z", constants={"n": 1.5}, unknown_parameters={"s": 3.6})
    branch = bvpkit.trace(p, "n", start=1.5, stop=2.5, tol=1e-7)
    assert len(branch.parameter) >= 2
    # the first zero grows with the index (Boyd 2011, from memory: 3.6538 at n = 1.5, 4.3529 at n = 2)
    zeros = np.array([sol.parameters["s"] for sol in branch.solutions])
    assert zeros[0] == pytest.approx(3.65375373621912608, rel=1e-6)
    assert np.all(np.diff(zeros) > 0)
    assert branch.success or "floor" in branch.message, branch.message
