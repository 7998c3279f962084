"""An example downstream model built on bvpkit: our catalyst-pellet and shelf-beam sizing helpers.

This is the kind of small package a team writes on top of bvpkit; ``test_models.py`` beside
it shows how such a package tests its physics with hypothesis and bvpkit.testing.
"""

from __future__ import annotations

import bvpkit

_SHAPES = {"slab": 0, "cylinder": 1, "sphere": 2}


def _pellet(shape: str) -> bvpkit.Problem:
    s = _SHAPES[shape]
    term = f" + ({s}/r)*c'" if s else ""
    return bvpkit.Problem([f"c''{term} = phi**2*c"], ["c'(0) = 0", "c(1) = 1"], (0, 1), independent="r",
                          constants={"phi": 1.0})


_PROBLEMS = {shape: _pellet(shape) for shape in _SHAPES}  # built once: constants change without recompiling


def effectiveness(thiele: float, shape: str = "sphere", tol: float = 1e-8) -> float:
    """Effectiveness factor of a first-order reaction in a pellet of the given shape.

    ``(s + 1) c'(1) / phi^2`` with ``s = 0, 1, 2`` for a slab, cylinder and sphere
    (the ratio of the reaction rate with diffusion to the rate at surface concentration).
    """
    problem = _PROBLEMS[shape].with_constants(phi=thiele)
    solution = bvpkit.solve(problem, tol=tol)
    if not solution.success:
        raise RuntimeError(f"pellet solve failed at phi = {thiele}: {solution.message}")
    return (_SHAPES[shape] + 1) * solution.evaluate("c'(1)") / thiele**2


_BEAM = bvpkit.Problem(["EI*w'''' = q"], ["w(0) = 0", "w'(0) = 0", "w''(L) = 0", "w'''(L) = 0"], (0, "L"),
                       constants={"EI": 1.0, "q": 1.0, "L": 1.0})


def tip_deflection(load: float, length: float, stiffness: float) -> float:
    """Tip deflection of our uniformly loaded cantilever (an engineering estimate only)."""
    solution = bvpkit.solve(_BEAM.with_constants(q=load, L=length, EI=stiffness), tol=1e-10)
    if not solution.success:
        raise RuntimeError(solution.message)
    return solution.evaluate("w(L)")
