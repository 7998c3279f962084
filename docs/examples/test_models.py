"""How a downstream package tests its bvpkit-based model for physical invariants."""

import math

import pytest
from hypothesis import assume, given
from hypothesis import strategies as st

import bvpkit
from bvpkit.testing import assert_solves
from pellet_model import _PROBLEMS, effectiveness, tip_deflection

moduli = st.floats(0.05, 30.0)
shapes = st.sampled_from(["slab", "cylinder", "sphere"])


@given(moduli, shapes)
def test_effectiveness_lies_between_zero_and_one(phi, shape):
    assert 0.0 < effectiveness(phi, shape) <= 1.0


@given(moduli, moduli, shapes)
def test_effectiveness_falls_as_the_modulus_grows(phi1, phi2, shape):
    assume(abs(phi1 - phi2) > 1e-3)
    low, high = sorted((phi1, phi2))
    assert effectiveness(high, shape) < effectiveness(low, shape)


@given(moduli)
def test_sphere_matches_the_textbook_formula(phi):
    # analytic: 3 (phi coth(phi) - 1) / phi^2 (Thiele 1939; any reaction-engineering text)
    assert effectiveness(phi, "sphere") == pytest.approx(3 * (phi / math.tanh(phi) - 1) / phi**2, rel=1e-6)


@given(moduli, shapes)
def test_every_pellet_solution_satisfies_its_equation(phi, shape):
    problem = _PROBLEMS[shape].with_constants(phi=phi)
    assert_solves(problem, bvpkit.solve(problem, tol=1e-8))


@given(st.floats(10.0, 1e4), st.floats(0.2, 5.0), st.floats(1e3, 1e6), st.floats(1.5, 4.0))
def test_deflection_is_proportional_to_load(load, length, stiffness, factor):
    one = tip_deflection(load, length, stiffness)
    assert tip_deflection(factor * load, length, stiffness) == pytest.approx(factor * one, rel=1e-8)
    # analytic: q L^4 / (8 EI) for a uniformly loaded cantilever
    assert one == pytest.approx(load * length**4 / (8 * stiffness), rel=1e-8)
