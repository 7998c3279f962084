"""The main job checked against sources outside the project (see tests/catalogue.py)."""

import math

import numpy as np
import pytest
from catalogue import BLASIUS_FPP0, CASES, blasius, bratu, bratu_slope, bratu_t

import bvpkit
from bvpkit.methods import REGISTRY


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.name)
def test_auto_matches_the_reference(case):
    sol = bvpkit.solve(case.make(), tol=case.tol, guess=case.guess)
    assert sol.success, sol.message
    value = sol.evaluate(case.quantity)
    assert value == pytest.approx(case.reference, rel=case.rel), case.source
    assert np.all(np.isfinite(sol.y))
    assert sol.diagnostics.error_estimate <= case.tol


@pytest.mark.parametrize("method", sorted(REGISTRY))
@pytest.mark.parametrize("case", CASES, ids=lambda c: c.name)
def test_every_method_matches_the_reference(method, case):
    sol = bvpkit.solve(case.make(), tol=case.tol, guess=case.guess, method=method)
    if not sol.success:
        pytest.skip(f"{method} does not claim success here: {sol.message}")
    assert sol.evaluate(case.quantity) == pytest.approx(case.reference, rel=case.rel), case.source


def test_blasius_to_1e8_with_the_default_guess_too():
    p = bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"], (0, "inf"),
                       independent="eta")
    sol = bvpkit.solve(p, tol=1e-10)
    assert sol.success, sol.message
    # Boyd 1999, SIAM Review 41(2), Table 1
    assert sol.evaluate("f''(0)") == pytest.approx(BLASIUS_FPP0, rel=1e-8)
    d = sol.diagnostics
    assert d.truncation_length is not None and d.truncation_length >= 10
    assert d.truncation_error <= 1e-10
    assert len(d.attempts) >= 2  # at least one lengthening was tried and compared


def test_blasius_displacement_thickness_integral():
    sol = bvpkit.solve(blasius(), tol=1e-10)
    # displacement thickness in eta: integral of (1 - f') = 1.7207876573 (Boyd 1999 quotes
    # beta = 1.21678... for eta scaled by sqrt(2); 1.7207876573 = 1.2167806 * sqrt(2); from memory)
    assert sol.integrate("1 - f'") == pytest.approx(1.7207876573, rel=1e-8)
    with pytest.raises(bvpkit.BvpkitError, match="does not converge"):
        sol.integrate("f'")


def test_bratu_analytic_solution_over_the_whole_interval():
    sol = bvpkit.solve(bratu(), tol=1e-9)
    t = bratu_t(1.0, "lower")
    x = np.linspace(0, 1, 23)
    exact = -2 * np.log(np.cosh((x - 0.5) * t / 2) / np.cosh(t / 4))  # analytic (Bratu 1914 form)
    assert np.max(np.abs(sol.evaluate("y", at=x) - exact)) < 1e-8


def test_bratu_upper_branch_from_a_large_guess_and_lower_from_default():
    lower = bvpkit.solve(bratu(), tol=1e-8)
    upper = bvpkit.solve(bratu(), tol=1e-8, guess={"y": "16*x*(1-x)"})
    assert lower.evaluate("y'(0)") == pytest.approx(bratu_slope(1.0, "lower"), rel=1e-8)  # analytic
    assert upper.evaluate("y'(0)") == pytest.approx(bratu_slope(1.0, "upper"), rel=1e-8)  # analytic
    # published values quoted in the issue: 0.549352728775 and 10.8468990194 (analytic formula)
    assert lower.evaluate("y'(0)") == pytest.approx(0.549352728775, rel=1e-9)
    assert upper.evaluate("y'(0)") == pytest.approx(10.8468990194, rel=1e-9)


def test_error_estimate_is_honest_on_the_boundary_layer():
    eps = 1e-3
    for tol in (1e-4, 1e-6, 1e-8):
        sol = bvpkit.solve(bvpkit.Problem(["eps*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1),
                                          constants={"eps": eps}), tol=tol)
        assert sol.success
        x = np.concatenate([sol.x, 0.5 * (sol.x[1:] + sol.x[:-1])])
        exact = -np.expm1(-x / eps) / -np.expm1(-1 / eps)  # analytic
        dexact = np.exp(-x / eps) / (eps * -np.expm1(-1 / eps))
        err = max(
            np.max(np.abs(sol.evaluate("y", at=x) - exact) / (1 + np.abs(exact))),
            np.max(np.abs(sol.evaluate("y'", at=x) - dexact) / (1 + np.abs(dexact))),
        )
        est = sol.diagnostics.error_estimate
        assert est <= tol
        assert est >= 0.1 * err, (tol, est, err)  # never below a tenth of the true error
        assert est <= 10 * err or est < 10 * tol * 1e-3, (tol, est, err)


def test_solution_arrays_follow_scipy_layout_and_names():
    sol = bvpkit.solve(blasius(), tol=1e-6)
    assert sol.y.shape == (3, sol.x.size)
    assert sol.state_names == ("f", "f'", "f''")
    assert np.all(np.diff(sol.x) > 0)
    assert sol.evaluate("f'", at=[0.0, 1.0, 2.0]).shape == (3,)
    # f''' from the equation: f''' = -f f''/2, zero at the wall (analytic)
    assert sol.evaluate("f'''(0)") == pytest.approx(0.0, abs=1e-12)
    with pytest.raises(bvpkit.BvpkitError, match="depends on the running point"):
        sol.evaluate("f'")
    with pytest.raises(bvpkit.BvpkitError, match="outside the solved interval"):
        sol.evaluate("f", at=[1e6])


def test_previous_solution_as_guess_converges_at_once():
    first = bvpkit.solve(bratu(), tol=1e-8)
    again = bvpkit.solve(bratu(), tol=1e-8, guess=first)
    assert again.success and again.diagnostics.iterations <= 2
    assert again.evaluate("y'(0)") == pytest.approx(first.evaluate("y'(0)"), rel=1e-9)


def test_failed_solve_is_data_not_an_exception():
    sol = bvpkit.solve(bvpkit.Problem(["eps*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1),
                                      constants={"eps": 1e-4}), max_nodes=30, tol=1e-8, method="collocation")
    assert not sol.success
    assert sol.status is bvpkit.Status.MESH_LIMIT
    assert "max_nodes" in sol.message and "residual is largest near x = 0" in sol.message
    assert sol.diagnostics.attempts and sol.diagnostics.attempts[0].status == "mesh_limit"


def test_solution_reports_parameters_and_json_ready_dict():
    sol = bvpkit.solve(bratu())
    data = sol.as_dict()
    import json

    json.dumps(data, allow_nan=False)
    assert data["success"] is True and data["status"] == "solved"
    assert math.isfinite(data["diagnostics"]["error_estimate"])
