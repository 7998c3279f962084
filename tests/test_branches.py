"""Continuation a design engineer can trust: requested points, infinite domains held, branch
points, fold curves, smooth drawings. Each check value has its source beside it."""

import math

import numpy as np
import pytest
from scipy.special import ellipk

import bvpkit
from bvpkit.io.cli import main


def wedge():
    return bvpkit.Problem(["f''' + f*f'' + beta*(1 - f'**2) = 0"], ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"],
                          (0, "inf"), independent="eta", constants={"beta": 1.0})


@pytest.fixture(scope="module")
def wedge_branch():
    return bvpkit.trace(wedge(), "beta", start=1.0, stop=-0.3, outputs=["f''(0)"], tol=1e-9, at=[0.0, -0.12],
                        return_to=-0.05)


def test_wedge_flows_through_the_separation_fold(wedge_branch):
    b = wedge_branch
    assert b.success, b.message
    # Blasius in this scaling: 0.469599988361 (Boyd 1999's 0.332057336215 times sqrt 2, analytic scaling)
    assert b.requested[0.0][0].evaluate("f''(0)") == pytest.approx(0.469599988361, abs=1e-7)
    # the separation fold (Belden et al. 2019; Hartree 1937 gives -0.1988), f''(0) = 0 there
    assert len(b.folds) == 1
    assert b.folds[0].parameter == pytest.approx(-0.1988377350, abs=1e-7)
    assert b.folds[0].outputs["f''(0)"] == pytest.approx(0.0, abs=1e-7)
    # both parts of the branch pass beta = -0.12; the lower one: -0.1429351944 (Belden et al. 2019)
    values = sorted(s.evaluate("f''(0)") for s in b.requested[-0.12])
    assert len(values) == 2
    assert values[0] == pytest.approx(-0.1429351944, abs=1e-7)
    assert b.parameter[-1] == -0.05


def test_an_infinite_domain_keeps_its_truncation_along_a_trace(wedge_branch):
    lengths = [t for t in wedge_branch.truncation if t is not None]
    assert lengths and len(set(lengths)) <= 2  # chosen once, moved out at most once
    for s in wedge_branch.solutions:
        assert s.diagnostics.truncation_length == pytest.approx(lengths[-1]) or s.diagnostics.truncation_length in lengths


def test_infinity_moves_out_along_a_trace_as_far_as_the_decay_needs():
    # y'' = a^2 y, y(0) = 1, y(inf) = 0: y = exp(-a x), y'(0) = -a (analytic). As a falls from
    # 2 to 0.1 the decay length grows twentyfold: the truncation held at the start is too short
    # later. Once the far-field check moved it only 1.5x per point (8e-6 off at a = 0.1 when the
    # steps were long), and each move made the natural steps collapse to 1e-7 (195 points).
    p = bvpkit.Problem(["y'' = a**2*y"], ["y(0) = 1", "y(inf) = 0"], (0, "inf"), constants={"a": 2.0})
    branch = bvpkit.trace(p, "a", start=2.0, stop=0.1, tol=1e-7, outputs=["y'(0)"])
    assert branch.success, branch.message
    assert branch.outputs["y'(0)"] == pytest.approx(-branch.parameter, abs=1e-6)
    assert branch.truncation[-1] > 2 * branch.truncation[0]
    assert len(branch.parameter) < 40


@pytest.fixture(scope="module")
def strut_branch():
    p = bvpkit.Problem(["theta'' + lam*sin(theta) = 0"], ["theta'(0) = 0", "theta'(1) = 0"], (0, 1),
                       constants={"lam": 5.0})
    return bvpkit.trace(p, "lam", start=5.0, stop=15.0, outputs=["theta(0)"], tol=1e-9,
                        at=[_elastica(math.pi / 6), _elastica(math.pi / 2)])


def _elastica(end_slope: float) -> float:
    """The load of the pinned elastica whose end slope is ``end_slope`` (analytic, through
    elliptic integrals: sqrt(lam) = 2 K(k), k = sin(alpha/2); scipy.special.ellipk takes m = k^2)."""
    return (2 * ellipk(math.sin(end_slope / 2) ** 2)) ** 2


def test_the_strut_branch_point_is_the_euler_load_and_the_trace_follows_the_bent_strut(strut_branch):
    b = strut_branch
    assert b.success, b.message
    assert len(b.branch_points) == 1 and b.branch_points[0].switched
    # analytic: the Euler load of the pinned strut, lam = pi^2
    assert b.branch_points[0].parameter == pytest.approx(math.pi**2, rel=1e-8)
    assert b.branch_points[0].error < 1e-6
    # the elastica: lam = 10.216231435665 at 30 degrees, 13.750371636041 at 90 degrees (analytic, above)
    assert _elastica(math.pi / 6) == pytest.approx(10.216231435665, rel=1e-12)
    assert _elastica(math.pi / 2) == pytest.approx(13.750371636041, rel=1e-12)
    at30 = b.requested[_elastica(math.pi / 6)]
    at90 = b.requested[_elastica(math.pi / 2)]
    assert len(at30) == 1 and len(at90) == 1  # on the bent branch only: the straight one was left
    assert at30[0].evaluate("theta(0)") == pytest.approx(math.pi / 6, rel=1e-8)
    assert at90[0].evaluate("theta(0)") == pytest.approx(math.pi / 2, rel=1e-8)
    assert b.outputs["theta(0)"][-1] > 1.7  # bent at lam = 15


def test_branch_points_can_be_left_alone():
    p = bvpkit.Problem(["theta'' + lam*sin(theta) = 0"], ["theta'(0) = 0", "theta'(1) = 0"], (0, 1),
                       constants={"lam": 8.0})
    b = bvpkit.trace(p, "lam", start=8.0, stop=12.0, outputs=["theta(0)"], tol=1e-8, branch_switching=False)
    assert b.success and len(b.branch_points) == 1 and not b.branch_points[0].switched
    assert np.all(np.abs(b.outputs["theta(0)"]) < 1e-9)  # it stayed on the straight branch


def test_a_drawn_branch_turns_by_at_most_the_angle_bound():
    p = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 1.0})
    b = bvpkit.trace(p, "lam", start=0.1, stop=5.0, outputs=["y'(0)"])
    data = np.column_stack([b.parameter, b.outputs["y'(0)"]])
    d = np.diff(data / np.ptp(data, axis=0), axis=0)
    cosine = np.sum(d[:-1] * d[1:], axis=1) / (np.linalg.norm(d[:-1], axis=1) * np.linalg.norm(d[1:], axis=1))
    # the bound stated in the docs (bvpkit.families.continuation.MAX_ANGLE, common practice, no source)
    assert np.degrees(np.arccos(np.clip(cosine, -1, 1))).max() <= math.degrees(bvpkit.families.continuation.MAX_ANGLE) + 1e-6
    assert len(b.folds) == 1


def frank_kamenetskii_slab():
    return bvpkit.Problem(["y'' + d*exp(y) = 0"], ["y'(0) = 0", "y'(1) + Bi*y(1) = 0"], (0, 1),
                          constants={"d": 0.1, "Bi": 1.0})


def test_the_ignition_limit_of_a_slab_against_the_biot_number():
    curve = bvpkit.fold_curve(frank_kamenetskii_slab(), "d", along="Bi", start=0.01, stop=1e5, tol=1e-9,
                              at=[0.1, 1.0, 10.0])
    assert curve.success, curve.message
    assert curve.along[0] == pytest.approx(0.01) and curve.along[-1] == pytest.approx(1e5)
    # Semenov's limit, d_c -> Bi/e as Bi -> 0 (analytic)
    assert curve.parameter[0] == pytest.approx(0.01 / math.e, abs=1e-4)
    # the slab with a fixed surface temperature, d_c -> 3.51383071912516 / 4 as Bi -> oo (analytic from
    # the Bratu fold; the half-thickness 1 is the Bratu interval of length 2)
    assert curve.parameter[-1] == pytest.approx(3.51383071912516 / 4, abs=1e-4)
    assert 3.51383071912516 / 4 == pytest.approx(0.878457679781, rel=1e-11)
    for bi in (0.1, 1.0, 10.0):
        one = bvpkit.trace(frank_kamenetskii_slab().with_constants(Bi=bi, d=0.02 * bi), "d", start=0.02 * bi,
                           stop=2.0, tol=1e-10, outputs=[])
        assert one.folds, one.message
        [fold] = curve.requested[bi]
        # the fold curve passes through the one-parameter folds (common practice, no source)
        assert float(fold.prepared.constants["d"]) == pytest.approx(one.folds[0].parameter, abs=1e-8)


def test_a_fold_curve_refined_on_its_forward_leg_still_traces_its_backward_leg():
    # from Bi = 1 (where the fold is found) forward to 100 the mesh is refined at tol 1e-8; the
    # backward leg to 0.1 once crashed on the finer mesh's border vectors (a raw ValueError)
    curve = bvpkit.fold_curve(frank_kamenetskii_slab(), "d", along="Bi", start=0.1, stop=100.0, tol=1e-8)
    assert curve.success, curve.message
    assert curve.along[0] == pytest.approx(0.1) and curve.along[-1] == pytest.approx(100.0)
    assert np.all(np.diff(curve.parameter) > 0)  # a higher Biot number needs more heat to ignite
    # at Bi = 100 the fold of a one-parameter trace (common practice, no source)
    one = bvpkit.trace(frank_kamenetskii_slab().with_constants(Bi=100.0, d=0.1), "d", start=0.1, stop=2.0,
                       tol=1e-10, outputs=[])
    assert curve.parameter[-1] == pytest.approx(one.folds[0].parameter, abs=1e-7)


def test_a_fold_curve_reports_a_cusp():
    # y'' + d exp(y/(1 + y/g)) = 0 (an Arrhenius law with an activation number g): the S-shaped
    # branch's two folds meet in a cusp at g near 4.07 (Frank-Kamenetskii's slab: the folds vanish
    # for g below about 4; Boddington, Gray and Harvey 1971, from memory)
    p = bvpkit.Problem(["y'' + d*exp(y/(1 + y/g)) = 0"], ["y'(0) = 0", "y(1) = 0"], (0, 1),
                       constants={"d": 0.5, "g": 8.0})
    curve = bvpkit.fold_curve(p, "d", along="g", start=8.0, stop=3.0, tol=1e-7)
    assert curve.cusps, curve.message
    assert 3.5 < curve.cusps[0]["along"] < 4.6


@pytest.mark.extra
def test_cli_traces_the_bundled_strut_and_draws_the_ignition_map(tmp_path, capsys):
    from pathlib import Path

    pytest.importorskip("matplotlib")
    specs = Path(__file__).resolve().parent.parent / "specs"
    assert main(["trace", str(specs / "strut_postbuckling.toml"), "--quiet", "--plot", str(tmp_path / "s.png")]) == 0
    out = capsys.readouterr().out
    assert "branch point at lam = 9.8696044" in out and "followed the other branch" in out
    assert (tmp_path / "s.png").exists()
    assert main(["fold-curve", str(specs / "ignition_map.toml"), "--plot", str(tmp_path / "map.png"),
                 "--csv", str(tmp_path / "map.csv")]) == 0
    out = capsys.readouterr().out
    assert "followed the fold in d" in out and (tmp_path / "map.png").exists()
    assert len((tmp_path / "map.csv").read_text().splitlines()) > 10


# -- stability as a steady state of the diffusion equation -----------------------------------

def _root_of_w_tan_w_is_one() -> float:
    from scipy.optimize import brentq

    return brentq(lambda w: w * math.tan(w) - 1.0, 0.1, 1.5)


@pytest.mark.parametrize(("equation", "conditions", "domain", "a", "exact", "source"), [
    ("y'' + a*y = 1", ["y(0) = 0", "y(1) = 0"], (0, 1), 2.0, lambda a: a - math.pi**2,
     "analytic: v'' + a v = mu v, v(0) = v(1) = 0: mu_1 = a - pi^2"),
    ("y'' + a*y = 1", ["y(0) = 0", "y(1) = 0"], (0, 1), 12.0, lambda a: a - math.pi**2,
     "analytic, as above: positive between pi^2 and 4 pi^2 (unstable)"),
    ("y'' + a*y = 1", ["y'(0) = 0", "y'(1) + y(1) = 0"], (0, 1), 0.5, lambda a: a - _root_of_w_tan_w_is_one()**2,
     "analytic: v = cos(w x), w tan w = 1 from the Robin end: mu_1 = a - w^2"),
    ("y'' + 0.5*y' + a*y = 1", ["y(0) = 0", "y(3) = 0"], (0, 3), 0.5, lambda a: a - 0.5**2 / 4 - (math.pi / 3)**2,
     "analytic: v = w exp(-x/4) removes the first derivative: mu_1 = a - b^2/4 - (pi/L)^2"),
])
def test_the_principal_eigenvalue_of_linear_steady_states(equation, conditions, domain, a, exact, source):
    from bvpkit.families.stability import principal_eigenvalue, stable

    sol = bvpkit.solve(bvpkit.Problem([equation], conditions, domain, constants={"a": a}), tol=1e-8)
    assert principal_eigenvalue(sol) == pytest.approx(exact(a), rel=1e-6, abs=1e-8), source
    assert stable(sol) is bool(exact(a) < 0)


def test_the_bratu_branch_is_stable_below_its_fold_and_unstable_above():
    # the principal eigenvalue crosses zero at the fold (common practice, no source); the
    # lower branch of the one-dimensional Bratu problem is stable, the upper one unstable
    # (from memory: Bebernes and Eberly 1989, Mathematical Problems from Combustion Theory)
    p = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 0.1})
    branch = bvpkit.trace(p, "lam", start=0.1, stop=5.0, outputs=["y'(0)"], tol=1e-6, return_to=1.0, stability=True)
    assert len(branch.folds) == 1
    slope = branch.outputs["y'(0)"]
    fold_slope = branch.folds[0].outputs["y'(0)"]  # 4 at the fold (analytic: y'(0) = 4 there)
    for s, judged in zip(slope, branch.stability):
        if abs(s - fold_slope) > 0.05 * fold_slope:
            assert judged is bool(s < fold_slope)
    assert branch.stability.count(True) >= 5 and branch.stability.count(False) >= 5
    assert "stability" in branch.table() and "unstable" in branch.summary()


def test_stability_is_judged_only_when_asked_and_where_the_reading_applies():
    bratu = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 0.5})
    assert set(bvpkit.trace(bratu, "lam", start=0.5, stop=1.0).stability) == {None}
    # a third-order flow and an eigenvalue problem are not steady states of u_t = u'' - g
    flow = bvpkit.trace(wedge(), "beta", start=1.0, stop=0.8, tol=1e-6, stability=True)
    assert flow.success and set(flow.stability) == {None}
    column = bvpkit.load("specs/strut_buckling.toml")
    assert set(bvpkit.trace(column, "L", start=2.0, stop=2.5, stability=True).stability) == {None}
    with pytest.raises(bvpkit.OptionError, match="stability"):
        bvpkit.trace(bratu, "lam", start=0.5, stop=1.0, stability="yes")


def test_the_bundled_ignition_spec_traces_with_its_stability(capsys):
    assert main(["trace", "specs/ignition_map.toml", "--quiet", "--tol", "1e-6"]) == 0
    out = capsys.readouterr().out
    assert " stable" in out and "unstable" in out


def test_the_principal_eigenvalue_of_a_coupled_pair():
    # u_t = u'' - (u - v), v_t = v'' - (2 v - u), u'(0) = v'(0) = 0, u(1) = 1, v(1) = 0; analytic:
    # modes cos(pi x / 2) times the eigenvectors of A = [[-1, 1], [1, -2]]: mu_1 = -(pi/2)^2 + max eig A
    from bvpkit.families.stability import principal_eigenvalue

    p = bvpkit.Problem(["u'' = u - v", "v'' = 2*v - u"], ["u'(0) = 0", "u(1) = 1", "v'(0) = 0", "v(1) = 0"], (0, 1))
    sol = bvpkit.solve(p, tol=1e-9)
    exact = -(math.pi / 2) ** 2 + max(np.linalg.eigvalsh(np.array([[-1.0, 1.0], [1.0, -2.0]])))
    assert principal_eigenvalue(sol) == pytest.approx(exact, rel=1e-8)


# -- folds met without failed overshoots; a spiral of folds ends the trace ----------------------
def test_a_trace_round_a_fold_tries_no_step_past_it(monkeypatch):
    # Bratu: natural steps run up to the fold at lam = 3.513830719 (analytic: the maximum of
    # lam = 8 (theta / cosh(theta / 4))^2 over theta; digits from memory); every solve the trace asks for converges: the fold is foreseen from the
    # tangents, or a bounded mesh fails fast and arclength takes over (no solve at a value
    # with no solution that refines to the global mesh limit)
    from bvpkit.families import continuation

    asked = []
    real = continuation.solve_at

    def spy(*args, **kwargs):  # noqa: ANN002, ANN003, ANN202
        sol = real(*args, **kwargs)
        asked.append(sol.status.word)
        return sol

    monkeypatch.setattr(continuation, "solve_at", spy)
    p = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 0.1})
    branch = bvpkit.trace(p, "lam", start=0.1, stop=5.0, outputs=["y'(0)"], tol=1e-8)
    assert branch.folds and branch.folds[0].parameter == pytest.approx(3.513830719125162, rel=1e-8)
    assert asked and "mesh_limit" not in asked, asked


def test_the_spiral_of_folds_of_the_sphere_ends_the_trace_by_itself():
    # Frank-Kamenetskii in a sphere: the branch winds through infinitely many folds towards the
    # singular solution y = ln(2 / (lam r^2)) at lam = 2 (analytic; Joseph and Lundgren 1973):
    # the trace stops by itself and says so, with the limit from the folds it saw
    p = bvpkit.Problem(["y'' + (2/r)*y' + lam*exp(y) = 0"], ["y'(0) = 0", "y(1) = 0"], (0, 1), independent="r",
                       constants={"lam": 0.1})
    branch = bvpkit.trace(p, "lam", start=0.1, stop=5.0, outputs=["y(0)"])
    assert "spirals" in branch.message and len(branch.folds) >= 4, branch.message
    limit = float(branch.message.split("close in on lam = ")[1].split(" ")[0])
    assert limit == pytest.approx(2.0, abs=0.01)
    assert len(branch.parameter) < 200  # ended before the point budget


@pytest.mark.parametrize("size", [1.0, 1e3, 1e6])
def test_a_trace_rounds_a_fold_whatever_the_units_of_its_constant(size):
    # Bratu with lam measured in units 1/size: the fold at lam = 3.51383071912516 size (analytic,
    # from lam = 8 t^2 / cosh^2 t at its maximum); a trace in Re ~ 5000 must step as one in Re/1000
    p = bvpkit.Problem(["y'' + (lam/S)*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1),
                       constants={"lam": 0.1 * size, "S": size})
    branch = bvpkit.trace(p, "lam", start=0.1 * size, stop=5.0 * size, outputs=["y'(0)"])
    assert branch.success, branch.message
    assert [f.parameter / size for f in branch.folds] == [pytest.approx(3.51383071912516, rel=1e-7)]
    assert len(branch.parameter) <= 60  # as many points as the trace in lam itself (51 today)
