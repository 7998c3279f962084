"""Problem classes: unknown parameters, eigenvalues, free ends, singular ends, periodic orbits,
integral conditions. Each check value has its source beside it."""

import math

import numpy as np
import pytest
import scipy.special as special
from scipy.integrate import solve_ivp

import bvpkit


@pytest.mark.parametrize("k", [1, 2, 3, 4, 5])
def test_sine_eigenvalues_by_mode(k):
    p = bvpkit.Problem(["y'' + lam*y = 0"], ["y(0) = 0", "y(pi) = 0"], (0, "pi"), eigenvalue="lam", mode=k)
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    assert sol.parameters["lam"] == pytest.approx(k**2, rel=1e-8)  # analytic: lam_k = k^2
    assert sol.parameter_errors["lam"] < 1e-6
    # the eigenfunction is normalised: integral of y^2 = 1, so y = sqrt(2/pi) sin(k x) (analytic)
    assert sol.integrate("y**2") == pytest.approx(1.0, rel=1e-8)
    x = np.linspace(0.1, 3.0, 7)
    assert np.abs(sol.evaluate("y", at=x)) == pytest.approx(np.abs(np.sqrt(2 / np.pi) * np.sin(k * x)), abs=1e-6)


@pytest.mark.parametrize("q", [0.5, 3.0])
@pytest.mark.parametrize("m", [0, 1, 2, 3, 4])
def test_mathieu_even_characteristic_values(m, q):
    # y'(0) = 0 with y'(pi/2) = 0 (m even, pi-periodic) or y(pi/2) = 0 (m odd, 2pi-periodic)
    bc = ["y'(0) = 0", "y'(pi/2) = 0"] if m % 2 == 0 else ["y'(0) = 0", "y(pi/2) = 0"]
    p = bvpkit.Problem(["y'' + (a - 2*q*cos(2*x))*y = 0"], bc, (0, "pi/2"), constants={"q": q},
                       eigenvalue="a", mode=m // 2 + 1)
    sol = bvpkit.solve(p, tol=1e-9)
    assert sol.success, sol.message
    assert sol.parameters["a"] == pytest.approx(special.mathieu_a(m, q), rel=1e-8, abs=1e-9)  # scipy.special


@pytest.mark.parametrize("q", [0.5, 3.0])
@pytest.mark.parametrize("m", [1, 2, 3, 4])
def test_mathieu_odd_characteristic_values(m, q):
    bc = ["y(0) = 0", "y(pi/2) = 0"] if m % 2 == 0 else ["y(0) = 0", "y'(pi/2) = 0"]
    p = bvpkit.Problem(["y'' + (b - 2*q*cos(2*x))*y = 0"], bc, (0, "pi/2"), constants={"q": q},
                       eigenvalue="b", mode=(m + 1) // 2)
    sol = bvpkit.solve(p, tol=1e-9)
    assert sol.success, sol.message
    assert sol.parameters["b"] == pytest.approx(special.mathieu_b(m, q), rel=1e-8, abs=1e-9)  # scipy.special


EI, LENGTH = 2.0e5, 3.0  # our own demo column


@pytest.mark.parametrize(
    ("equation", "conditions", "factor", "source"),
    [
        (["EI*w'' + P*w = 0"], ["w(0) = 0", "w(L) = 0"], 1.0, "analytic: pinned-pinned P = pi^2 EI / L^2"),
        (["EI*w'''' + P*w'' = 0"], ["w(0) = 0", "w'(0) = 0", "w''(L) = 0", "EI*w'''(L) + P*w'(L) = 0"], 0.25,
         "analytic: clamped-free P = pi^2 EI / (4 L^2)"),
        (["EI*w'''' + P*w'' = 0"], ["w(0) = 0", "w'(0) = 0", "w(L) = 0", "w'(L) = 0"], 4.0,
         "analytic: clamped-clamped P = 4 pi^2 EI / L^2"),
    ],
)
def test_euler_buckling_loads(equation, conditions, factor, source):
    p = bvpkit.Problem(equation, conditions, (0, "L"), constants={"EI": EI, "L": LENGTH}, eigenvalue="P")
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    assert sol.parameters["P"] == pytest.approx(factor * math.pi**2 * EI / LENGTH**2, rel=1e-8), source


@pytest.mark.parametrize("mode", [1, 2, 3])
def test_the_eigenvalue_guess_of_a_column_whose_modes_keep_one_sign(mode):
    # a column clamped at the base and free at the top: every buckled shape w = 1 - cos(...)
    # keeps one sign, so the modes are told apart by the order of the loads alone; mode 3's
    # guess once came out at 1.7e10. Analytic: P_k = (2k - 1)^2 pi^2 EI / (4 L^2) (Euler); the
    # guess is a trapezoidal-rule eigenvalue on 121 nodes, so 1% is its accuracy here.
    from bvpkit.reduce.eigenvalue import eigen_guess
    from bvpkit.reduce.guess import initial_mesh

    p = bvpkit.prepare(bvpkit.Problem(["EI*w'''' + P*w'' = 0"],
                                      ["w(0) = 0", "w'(0) = 0", "w''(L) = 0", "EI*w'''(L) + P*w'(L) = 0"],
                                      (0, "L"), constants={"EI": EI, "L": LENGTH}, eigenvalue="P", mode=mode))
    (eigenvalue,) = p.transforms
    _, load = eigen_guess(p.compiled, initial_mesh(41), p.k(), eigenvalue.index, mode)
    assert load == pytest.approx((2 * mode - 1) ** 2 * math.pi**2 * EI / (4 * LENGTH**2), rel=1e-2)
    # and the solve calls it the mode asked for (it said other_mode from mode 2 on)
    sol = bvpkit.solve(p, tol=1e-9)
    assert sol.status is bvpkit.Status.SOLVED, sol.message
    assert sol.parameters["P"] == pytest.approx((2 * mode - 1) ** 2 * math.pi**2 * EI / (4 * LENGTH**2), rel=1e-8)


@pytest.mark.parametrize("phi", [0.5, 2.0, 10.0])
def test_spherical_pellet_effectiveness_with_the_singular_centre(phi):
    p = bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c(1) = 1"], (0, 1), independent="r",
                       constants={"phi": phi})
    assert bvpkit.prepare(p).layout.singular  # detected, not started at a small epsilon
    sol = bvpkit.solve(p, tol=1e-9)
    assert sol.success, sol.message
    assert "singular at the left end" in sol.diagnostics.selection
    effectiveness = sol.evaluate("3*c'(1)/phi**2")
    # analytic: eta = 3 (phi coth(phi) - 1) / phi^2 (Thiele 1939; any reaction-engineering text)
    assert effectiveness == pytest.approx(3 * (phi / math.tanh(phi) - 1) / phi**2, rel=1e-8)
    # analytic profile c = sinh(phi r) / (r sinh(phi)), c(0) = phi / sinh(phi)
    assert sol.evaluate("c(0)") == pytest.approx(phi / math.sinh(phi), rel=1e-7)


@pytest.mark.parametrize("method", ["single_shooting", "multiple_shooting", "collocation6"])
def test_a_method_that_cannot_take_the_singular_centre_is_refused_before_it_runs(method):
    p = bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c(1) = 1"], (0, 1), independent="r",
                       constants={"phi": 2.0})
    with pytest.raises(bvpkit.OptionError, match="singular at the left end.*use collocation"):
        bvpkit.solve(p, method=method)


def test_cylinder_singular_term_and_its_derivative_at_the_centre():
    # c'' + c'/r = c: c = I0(r)/I0(1) (analytic; scipy.special.i0)
    p = bvpkit.Problem(["c'' + c'/r = c"], ["c'(0) = 0", "c(1) = 1"], (0, 1), independent="r")
    sol = bvpkit.solve(p, tol=1e-9)
    assert sol.evaluate("c(0)") == pytest.approx(1 / special.i0(1.0), rel=1e-8)  # scipy.special
    assert sol.evaluate("c''(0)") == pytest.approx(0.5 / special.i0(1.0), rel=1e-6)  # limit of (I0''(0)) = 1/2


def test_free_end_found_by_rescaling():
    # y = sin x reaches 1/2 at s = pi/6 (analytic)
    p = bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y'(0) = 1", "y(s) = 1/2"], (0, "s"),
                       unknown_parameters={"s": 1.0})
    sol = bvpkit.solve(p, tol=1e-9)
    assert sol.success, sol.message
    assert sol.parameters["s"] == pytest.approx(math.pi / 6, rel=1e-8)  # analytic: sin(s) = 1/2
    assert sol.x[-1] == pytest.approx(sol.parameters["s"])  # the mesh is in x, not in [0, 1]
    assert sol.evaluate("y'(s)") == pytest.approx(math.cos(math.pi / 6), rel=1e-7)  # analytic: y' = cos x


def test_fin_length_for_a_tip_temperature_free_end():
    # theta(L)/theta_b = 1/cosh(mL) (analytic, insulated tip): L = acosh(2)/m for half the base excess
    m = 12.0
    p = bvpkit.Problem(["theta'' = m**2*theta"], ["theta(0) = 1", "theta'(L) = 0", "theta(L) = 1/2"],
                       (0, "L"), constants={"m": m}, unknown_parameters={"L": 0.05})
    sol = bvpkit.solve(p, tol=1e-9)
    assert sol.parameters["L"] == pytest.approx(math.acosh(2.0) / m, rel=1e-8)


def test_van_der_pol_period_with_an_automatic_phase_condition():
    p = bvpkit.Problem(["u'' - mu*(1 - u**2)*u' + u = 0"], ["u(0) = u(T)", "u'(0) = u'(T)"], (0, "T"),
                       constants={"mu": 1.0}, unknown_parameters={"T": 6.0}, guess={"u": "2*cos(2*pi*x/T)"})
    assert p.phase
    sol = bvpkit.solve(p, tol=1e-8)
    assert sol.success, sol.message
    # from memory: T = 6.6632868593231 for mu = 1; checked here against an independent long IVP run
    assert sol.parameters["T"] == pytest.approx(6.6632868593231, rel=1e-8)
    ivp = solve_ivp(lambda t, z: [z[1], (1 - z[0] ** 2) * z[1] - z[0]], (0, 80), [2.0, 0.0], rtol=1e-11,
                    atol=1e-11, events=lambda t, z: z[1], dense_output=True)
    maxima = [t for t, z in zip(ivp.t_events[0], ivp.y_events[0]) if z[0] > 0]
    assert sol.parameters["T"] == pytest.approx(maxima[-1] - maxima[-2], rel=1e-7)


def test_integral_condition_through_an_added_state():
    # c'' = phi^2 c, c'(0) = 0, integral(c) = 1/2: c(1) = phi coth(phi)/2 (analytic)
    phi = 3.0
    p = bvpkit.Problem(["c'' = phi**2*c"], ["c'(0) = 0", "integral(c) = 1/2"], (0, 1), constants={"phi": phi})
    sol = bvpkit.solve(p, tol=1e-9)
    assert sol.success, sol.message
    assert sol.state_names[-1] == "integral(c)"
    assert sol.evaluate("c(1)") == pytest.approx(phi / math.tanh(phi) / 2, rel=1e-8)
    assert sol.integrate("c") == pytest.approx(0.5, rel=1e-8)


def test_unknown_parameter_with_its_error_estimate():
    # Bratu with y(1/2)... posed as: lam unknown, y'(0) = 1 given; analytic lam from the Bratu formula:
    # y'(0) = t tanh(t/4) = 1 -> t, and lam = t^2 / (2 cosh^2(t/4))
    from scipy.optimize import brentq

    t = brentq(lambda t: t * math.tanh(t / 4) - 1.0, 0.1, 4.0)
    p = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0", "y'(0) = 1"], (0, 1),
                       unknown_parameters={"lam": 1.0})
    for method in ("collocation", "multiple_shooting", "single_shooting"):
        sol = bvpkit.solve(p, tol=1e-9, method=method)
        assert sol.success, (method, sol.message)
        assert sol.parameters["lam"] == pytest.approx(t**2 / (2 * math.cosh(t / 4) ** 2), rel=1e-8), method
        assert 0 <= sol.parameter_errors["lam"] < 1e-7


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        (dict(equations=["y'' + lam*y = 0"], conditions=["y(0) = 0"], domain=(0, 1), eigenvalue="lam"),
         r"1 boundary condition\(s\) given, 2 needed \(2 for y; the eigenvalue 'lam' brings its own normalisation\)"),
        (dict(equations=["y'' + lam*y**3 = 0"], conditions=["y(0) = 0", "y(1) = 0"], domain=(0, 1), eigenvalue="lam"),
         "linear and homogeneous"),
        (dict(equations=["y'' + lam**2*y = 0"], conditions=["y(0) = 0", "y(1) = 0"], domain=(0, 1), eigenvalue="lam"),
         "not linear in the eigenvalue"),
        (dict(equations=["y'' + lam*y = 1"], conditions=["y(0) = 0", "y(1) = 0"], domain=(0, 1), eigenvalue="lam"),
         "linear and homogeneous"),
        (dict(equations=["y'' + lam*y = 0"], conditions=["y(0) = 0", "y(1) = 1"], domain=(0, 1), eigenvalue="lam"),
         "conditions must be linear and homogeneous"),
        (dict(equations=["y'' + y = 0"], conditions=["y(0) = 0", "y(1) = 0"], domain=(0, 1), mode=2),
         "no eigenvalue"),
        (dict(equations=["y'' + y'/x**2 = 0"], conditions=["y'(0) = 0", "y(1) = 1"], domain=(0, 1)),
         "singular at x = 0 in a way bvpkit cannot treat|not of the form"),
        (dict(equations=["y'' + y'/(1 - x) = 0"], conditions=["y(0) = 0", "y(1) = 1"], domain=(0, 1)),
         "singular at the right end"),
        (dict(equations=["y'' + y = 0"], conditions=["y(0) = 0", "y(T) = 0"], domain=(0, "T"),
              unknown_parameters={"T": 1.0}), r"2 boundary condition\(s\) given, 3 needed \(2 for y \+ 1 for unknown"),
        (dict(equations=["u'' + u = 0"], conditions=["u(0) = u(T)"], domain=(0, "T"), unknown_parameters={"T": 6.0}),
         "- 1 phase condition bvpkit adds"),
        (dict(equations=["y'' + integral(y) = 0"], conditions=["y(0) = 0", "y(1) = 0"], domain=(0, 1)),
         "integral"),
    ],
)
def test_bad_problem_classes_are_explained(kwargs, message):
    with pytest.raises(bvpkit.BvpkitError, match=message):
        bvpkit.Problem(**kwargs)


def test_mode_mismatch_is_reported():
    p = bvpkit.Problem(["y'' + lam*y = 0"], ["y(0) = 0", "y(pi) = 0"], (0, "pi"), eigenvalue="lam", mode=2)
    sol = bvpkit.solve(p, guess={"y": "sin(3*x)"}, tol=1e-8)  # a guess with the zeros of mode 3
    if sol.parameters["lam"] == pytest.approx(9.0, rel=1e-6):  # analytic: lam_3 = 9, lam_2 = 4
        assert sol.status is bvpkit.Status.OTHER_MODE and "mode 3" in sol.message
    else:
        assert sol.success and sol.parameters["lam"] == pytest.approx(4.0, rel=1e-6)


def test_bundled_problem_class_specs_give_their_analytic_answers():
    from pathlib import Path

    specs = Path(__file__).resolve().parent.parent / "specs"
    strut = bvpkit.solve(bvpkit.load(specs / "strut_buckling.toml"))
    assert strut.outputs["critical_load_N"] == pytest.approx(math.pi**2 * 7.2e4 / (4 * 3.0**2), rel=1e-8)  # analytic
    pellet = bvpkit.solve(bvpkit.load(specs / "pellet_centre_modulus.toml"))
    phi = pellet.outputs["thiele_modulus"]
    assert phi / math.sinh(phi) == pytest.approx(0.2, rel=1e-8)  # analytic: c(0) = phi / sinh(phi)
    fin = bvpkit.solve(bvpkit.load(specs / "fin_length_for_tip.toml"))
    m = math.sqrt(4 * 25.0 / (390.0 * 0.004))
    assert fin.outputs["fin_length_m"] == pytest.approx(math.acosh(1 / 0.3) / m, rel=1e-8)  # analytic
    slab = bvpkit.solve(bvpkit.load(specs / "slab_total_uptake.toml"))
    assert slab.outputs["surface_concentration"] == pytest.approx(0.5 * 3.0 / math.tanh(3.0), rel=1e-8)  # analytic
    oscillator = bvpkit.solve(bvpkit.load(specs / "oscillator_period.toml"))
    assert oscillator.success and 6.6 < oscillator.outputs["period"] < 7.6  # between mu = 1 and mu = 2 (from memory)
