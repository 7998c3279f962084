"""A drawn problem with its exact solution."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import sympy as sp


@dataclass
class Manufactured:
    """A well-posed problem whose exact solution is known.

    Attributes
    ----------
    problem : bvpkit.Problem
    exact : sympy.Expr
        The exact solution ``u(x)`` (the one unknown function is named ``u``).
    description : str
        The equation, conditions and exact solution, for failure messages.
    others : dict of str to sympy.Expr
        Exact solutions of the problem's other unknowns (the algebraic unknown ``w`` of an
        index-1 problem), by name; empty for one unknown.
    """

    problem: object
    exact: sp.Expr
    description: str
    others: dict = field(default_factory=dict)
    _numeric: dict = field(default_factory=dict, repr=False)

    def other(self, name: str, x) -> np.ndarray:  # noqa: ANN001
        """The exact solution of the unknown ``name`` (one of :attr:`others`) at ``x``."""
        key = ("other", name)
        if key not in self._numeric:
            # lambdify runs on an expression this module built itself, never on user text
            self._numeric[key] = sp.lambdify(self.problem.x, self.others[name], modules="numpy")
        values = self._numeric[key](np.asarray(x, float))
        return np.broadcast_to(values, np.shape(x)).astype(float)

    def __call__(self, x, derivative: int = 0) -> np.ndarray:  # noqa: ANN001
        """The exact solution (or its ``derivative``-th derivative) at ``x``."""
        if derivative not in self._numeric:
            symbol = self.problem.x
            expr = sp.diff(self.exact, symbol, derivative) if derivative else self.exact
            # lambdify runs on an expression this module built itself, never on user text
            self._numeric[derivative] = sp.lambdify(symbol, expr, modules="numpy")
        values = self._numeric[derivative](np.asarray(x, float))
        return np.broadcast_to(values, np.shape(x)).astype(float)

    def __repr__(self) -> str:
        return f"Manufactured({self.description})"
