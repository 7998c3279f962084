"""Algebraic equations beside the differential ones: index-1 boundary-value DAEs.

An unknown function without derivatives in the equations is *algebraic*, and an equation
without derivatives is an *algebraic equation* (``0 = h1*(Th - Tw) - h2*(Tw - Tc)``, or
``Tw = f(Th, Tc)``). This class sets the algebraic equations aside as the standard form's
``0 = G(t, Y, Z)`` (:class:`~bvpkit.reduce.form.StandardForm`), matched one to one with
the algebraic unknowns ``Z`` they determine: a matching of the bipartite graph of which
unknown each equation holds (Duff, "On algorithms for obtaining a maximum transversal",
ACM TOMS 7 (1981) 315-330: augmenting paths). Where no matching exists the system is not of
index 1 (an algebraic equation holds no algebraic unknown left for it: it constrains the
differential states alone, index 2 or more; or an algebraic unknown no equation holds), and
the problem is refused with what to write instead: the constraint differentiated once.

The problem is then solved as the ODE of its state-space form (Hairer and Wanner, Solving
ODEs II, sec. VI.1): ``Z`` is found by Newton's method from ``G = 0`` at every point where a
method evaluates the equations (:mod:`bvpkit.programs.algebraic`), so every method takes
it; the user's guess of an algebraic unknown (or a previous solution) is where those
iterations start, which picks the branch of an equation with several roots (:meth:`begin`).
Index 1 along the solution (``dG/dZ`` non-singular) is checked on every converged solution
(:meth:`check`), and a solve that failed where the algebraic equations stopped having a
root says where (:meth:`diagnose`): a turning point of the constraint.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .._lazy import LazyModule
from ..errors import ProblemError
from ..methods.diagnostics import hermite
from ..status import Status
from .mapping import Start, physical, positions
from .transform import Transform, register

sp = LazyModule("sympy")
_form = LazyModule("bvpkit.reduce.form")  # SymPy's work: loaded only when a problem is reduced

#: ``|det dG/dZ|`` below this fraction of the product of the norms of ``G``'s rows (in ``Y``
#: and ``Z``) is singular to working precision: index 1 is lost there.
_SINGULAR = 1e-10
#: An interior minimum of ``|det dG/dZ|`` below this fraction of its median along the solution
#: is a point where index 1 is lost (the determinant dips to zero between nodes).
_DIP = 1e-6


def _derivative_free(eq) -> bool:  # noqa: ANN001
    return not eq.atoms(sp.Derivative)


@register
@dataclass(frozen=True)
class Algebraic(Transform):
    """Algebraic unknowns ``unknowns``, each determined by the algebraic equation of the
    same place in ``equations`` (as written; those of the first region); ``held`` names the
    conditions on algebraic values."""

    kind = "algebraic"
    needs = frozenset({"algebraic"})
    unknowns: tuple = ()
    equations: tuple = ()
    #: The given conditions that hold algebraic values: (row of the conditions, text).
    held: tuple = ()

    # -- symbolic -------------------------------------------------------------------------
    @classmethod
    def applies(cls, problem) -> bool:  # noqa: ANN001
        return bool(problem.algebraic) or any(_derivative_free(eq) for region in problem.regions
                                              for eq in region.equations)

    @classmethod
    def set_aside(cls, work) -> None:  # noqa: ANN001
        """The algebraic equations of each region set aside as ``G`` (in the local symbols),
        ordered so that the ``j``-th determines the ``j``-th algebraic unknown."""
        problem = work.problem
        matched_texts = []
        for r in range(len(work.equations)):
            equations, texts = work.equations[r], work.texts[r]
            plain = [i for i, eq in enumerate(equations) if _derivative_free(eq)]
            replace = {**work.names.region(r), **work.replacements()}
            G = [equations[i].xreplace(replace) for i in plain]
            order = _matching(G, work.zlocal)
            unmatched = [plain[i] for i in range(len(plain)) if i not in order.values()]
            if unmatched or len(order) < len(work.zlocal):
                raise ProblemError(_not_index_one(problem, work, r, plain, order, unmatched))
            work.constraints[r] = [G[order[j]] for j in range(len(work.zlocal))]
            matched_texts.append(tuple(texts[plain[order[j]]] for j in range(len(work.zlocal))))
            keep = [i for i in range(len(equations)) if i not in plain]
            work.equations[r] = [equations[i] for i in keep]
            work.texts[r] = [texts[i] for i in keep]
        work.scratch[cls.kind] = matched_texts[0] if matched_texts else ()

    @classmethod
    def conditions(cls, work) -> None:  # noqa: ANN001
        """A condition that holds algebraic values only, whose algebraic equations hold no
        state and no parameter, fixes nothing the solve can change: it over-determines."""
        states = set(work.local) | set(work.zlocal)
        parameters = work.parameter_symbols
        by_symbol = {symbol: key for key, symbol in work.zvalues.items()}
        for number, condition in enumerate(work.given):
            used = condition.free_symbols
            if any(s.name.startswith("_v") for s in used) or used & parameters:
                continue
            held = [by_symbol[s] for s in used if s in by_symbol]
            if not held:
                continue
            free = False
            for j, point, side in held:
                region = point if side > 0 else point - 1
                g = work.constraints[region][j]
                if (g.free_symbols - set(work.zlocal)) & (states | parameters):
                    free = True
            if not free:
                name = work.algebraic[held[0][0]]
                text = work.problem.condition_text[number]
                raise ProblemError(
                    f"condition {number + 1} ({text}) over-determines the problem: {name} is fixed at every point by "
                    f"its algebraic equation alone, which holds no differential state or unknown parameter, so "
                    f"the condition either contradicts it or repeats it; drop it and give a condition on the "
                    f"differential states instead"
                )

    @classmethod
    def finish(cls, work):  # noqa: ANN001, ANN206
        values = set(work.zvalues.values())
        held = tuple((i, work.problem.condition_text[i]) for i, c in enumerate(work.given) if c.free_symbols & values)
        return cls(tuple(work.algebraic), tuple(work.scratch.get(cls.kind, ())), held)

    @classmethod
    def read(cls, fields) -> Algebraic:  # noqa: ANN001
        unknowns, equations, held = fields.get("unknowns"), fields.get("equations"), fields.get("held")
        if (set(fields) != {"unknowns", "equations", "held"} or not isinstance(unknowns, list | tuple)
                or not isinstance(equations, list | tuple) or len(unknowns) != len(equations)
                or not all(isinstance(v, str) and len(v) < 10_000 for v in (*unknowns, *equations))
                or not isinstance(held, list | tuple)
                or not all(isinstance(h, list | tuple) and len(h) == 2 and type(h[0]) is int and 0 <= h[0] < 100_000
                           and isinstance(h[1], str) and len(h[1]) < 10_000 for h in held)):
            raise ValueError("algebraic: names of the algebraic unknowns, their equations and conditions expected")
        return cls(tuple(unknowns), tuple(equations), tuple((int(i), str(t)) for i, t in held))

    # -- numerical ------------------------------------------------------------------------
    def begin(self, prepared, t, y, p, k, guess) -> None:  # noqa: ANN001
        """Seed the inner Newton iterations for ``Z``: from a previous solution's ``Z``, the
        user's guesses of the algebraic unknowns, or (by default) from a constant."""

        compiled = prepared.compiled
        layout = compiled.layout
        start = None
        with np.errstate(all="ignore"):
            if isinstance(guess, Start):
                before = np.asarray(guess.compiled.algebraic(guess.t, guess.y, guess.p, guess.k), float)
                if before.size:
                    start = np.vstack([np.interp(t, guess.t, row) for row in before])
            elif guess:
                recipes = [guess.get(name) for name in layout.algebraic]
                if any(r is not None and r.kind == "expression" for r in recipes):
                    maps = np.asarray(compiled.maps(p, k), float)
                    x = physical(t, maps, layout.stretch)  # (regions, m)
                    points = positions(maps)
                    start = np.zeros((layout.n_algebraic, t.size))
                    size = len(layout.algebraic)
                    for j, recipe in enumerate(recipes):
                        if recipe is None or recipe.kind != "expression":
                            continue
                        values = recipe(x.ravel(), points, p, k)[0].reshape(layout.regions, t.size)
                        for r in range(layout.regions):
                            start[r * size + j] = values[r]
        compiled.seed(t, y, p, k, start)

    def check(self, prepared, outcome, k):  # noqa: ANN001, ANN201
        """Index 1 along a converged solution: ``dG/dZ`` must not change sign or vanish between
        the nodes (a turning point of the constraint)."""
        compiled = prepared.compiled
        space = getattr(compiled, "space", None)
        if space is None:
            return None
        x = np.asarray(outcome.x, float)

        mid = 0.5 * (x[1:] + x[:-1])
        points = np.sort(np.concatenate([x, mid]))
        with np.errstate(all="ignore"):
            states = hermite(compiled, x, outcome.y, outcome.p, k)(points)
            det, scale = space.determinant(points, states, outcome.p, k)
        if not (np.isfinite(det).all() and np.isfinite(scale).all()):
            return None  # the values themselves are not finite: the guards of settle say so
        size = np.abs(det)
        ratio = size / np.where(scale > 0, scale, 1.0)
        flips = np.flatnonzero(np.sign(det[1:]) * np.sign(det[:-1]) < 0)
        # an interior dip of |det| far below its typical size: the constraint's gradient itself may
        # vanish there too (two branches of roots crossing), which the ratio above does not see
        dips = np.flatnonzero((size[1:-1] < size[:-2]) & (size[1:-1] < size[2:])
                              & (size[1:-1] <= _DIP * np.median(size))) + 1
        small = np.union1d(np.flatnonzero(ratio <= _SINGULAR), dips)
        if not flips.size and not small.size:
            return None
        if flips.size:
            i = int(flips[0])
            t = float(points[i] + (points[i + 1] - points[i]) * det[i] / (det[i] - det[i + 1]))
        else:
            t = float(points[int(small[0])])
        where = self._place(prepared, outcome.p, k, t)
        return (Status.SINGULAR,
                f"index 1 is lost along this solution: the Jacobian of the algebraic equations in "
                f"{self._names()} is singular at {where} ({self._equations()}), a turning point of the constraint "
                f"where two branches of its roots meet, so {self._names()} {'is' if len(self.unknowns) == 1 else 'are'} "
                "not determined there; if the model is meant to pass it, differentiate the constraint once and "
                "write it as a differential equation")

    def diagnose(self, prepared, outcome, k) -> str | None:  # noqa: ANN001
        """Where the algebraic equations stopped having a root during a failed solve; or, for a
        singular Newton matrix, a condition on an algebraic unknown that repeats what the
        others fix (through its algebraic equation)."""
        trouble = prepared.compiled.algebraic_trouble()
        if not trouble and outcome.status is Status.SINGULAR and self.held:
            return self._repeated(prepared, outcome, k)
        if not trouble or outcome.status not in (Status.NON_FINITE, Status.NOT_CONVERGED, Status.SINGULAR,
                                                 Status.MESH_LIMIT, Status.INTEGRATION_FAILED):
            return None
        t = min(t for t, _ in trouble)
        singular = any(flag for _, flag in trouble)
        where = self._place(prepared, outcome.p, k, t)
        why = (f"the Jacobian of the algebraic equations in {self._names()} is singular there"
               if singular else f"Newton's method for {self._names()} found no root there from its neighbours")
        return (f"the algebraic equations ({self._equations()}) could not be solved for {self._names()} from "
                f"{where} on along the iterates ({why}): likely a turning point of the constraint near there, where "
                "its Jacobian in the algebraic unknowns is singular, index 1 is lost and the branch of roots ends; "
                f"check the constants and conditions, or give a guess of {self.unknowns[0]} on another branch")

    def _repeated(self, prepared, outcome, k) -> str | None:  # noqa: ANN001
        """The first condition on algebraic values whose row of the conditions' Jacobian (in the
        end states and parameters, the algebraic values followed through their equations) the
        other rows already span, at the outcome's ends."""
        compiled = prepared.compiled
        with np.errstate(all="ignore"):
            y = np.asarray(outcome.y, float)
            A, B, P = compiled.bc_jac(y[:, 0], y[:, -1], np.asarray(outcome.p, float), np.asarray(k, float))
            M = np.hstack([A, B, np.reshape(P, (A.shape[0], -1))])
        if not np.isfinite(M).all():
            return None
        full = np.linalg.matrix_rank(M)
        if full == M.shape[0]:
            return None
        for row, text in self.held:
            if row < M.shape[0] and np.linalg.matrix_rank(np.delete(M, row, axis=0)) == full:
                return (f"the conditions over-determine the problem: '{text}' holds an algebraic unknown, which "
                        f"its algebraic equation ({self._equations()}) ties to states the other conditions "
                        "already fix; give a condition on another state instead")
        return None

    # -- words ----------------------------------------------------------------------------
    def _names(self) -> str:
        return ", ".join(self.unknowns)

    def _equations(self) -> str:
        return "; ".join(self.equations)

    @staticmethod
    def _place(prepared, p, k, t: float) -> str:  # noqa: ANN001

        compiled = prepared.compiled
        layout = compiled.layout
        with np.errstate(all="ignore"):
            maps = np.asarray(compiled.maps(np.asarray(p, float), np.asarray(k, float)), float)
        xs = physical(np.array([t]), maps, layout.stretch)[:, 0]
        shown = " / ".join(f"{v:.4g}" for v in xs if math.isfinite(v))
        return f"{layout.independent} = {shown}"


# -- the matching and the words of a refusal -----------------------------------------------
def _matching(G: list, z: tuple) -> dict[int, int]:
    """A maximum matching of algebraic unknowns to the equations that hold them: ``{unknown j:
    equation i}`` (augmenting paths, Duff 1981)."""
    holds = [[i for i, g in enumerate(G) if symbol in g.free_symbols] for symbol in z]
    owner: dict[int, int] = {}  # equation -> unknown

    def augment(j: int, seen: set) -> bool:
        for i in holds[j]:
            if i in seen:
                continue
            seen.add(i)
            if i not in owner or augment(owner[i], seen):
                owner[i] = j
                return True
        return False

    for j in range(len(z)):
        augment(j, set())
    return {j: i for i, j in owner.items()}


def _not_index_one(problem, work, r: int, plain: list, order: dict, unmatched: list) -> str:  # noqa: ANN001
    """Why the algebraic equations of region ``r`` do not make an index-1 system, and what to write."""
    texts = work.texts[r]
    where = "" if len(work.equations) == 1 else f" of region {r + 1}"
    left = [work.algebraic[j] for j in range(len(work.zlocal)) if j not in order]
    algebraic = {sp.Function(name)(problem.x) for name in work.algebraic}
    lone = [i for i in unmatched if not work.equations[r][i].atoms(sp.core.function.AppliedUndef) & algebraic]
    if lone or not left:
        i = (lone or unmatched)[0]
        eq = work.equations[r][i]
        held = sorted({f.func.__name__ for f in eq.atoms(sp.core.function.AppliedUndef)})
        constrained = ", ".join(n for n in held if n not in work.algebraic) or "no unknown"
        written = lambda e: _form._as_written(e, problem)  # noqa: E731
        derived = sp.diff(eq, problem.x)
        instead = f"0 = {_signed(derived, written)}"
        substituted = _substituted(problem, work.equations[r], plain, derived)
        if substituted is not None:
            instead += f" (with the differential equations: 0 = {_signed(substituted, written)})"
        end = problem.points[0]
        keep = ""
        if end not in (sp.oo, -sp.oo):
            point = sp.sstr(end)
            at_end = _signed(eq.xreplace({f: sp.Symbol(f"{f.func.__name__}({point})")
                                          for f in eq.atoms(sp.core.function.AppliedUndef)}).xreplace({problem.x: end}))
            keep = f", and give the constraint at one end as a condition (0 = {at_end})"
        return (f"index: the algebraic equation{where} '{texts[i]}' (no derivatives) holds no algebraic unknown it "
                f"could determine: it constrains {constrained} alone, so the system is of index 2 or more (bvpkit "
                f"solves index 1); differentiate the constraint once and write {instead} in its place{keep}")
    name = left[0]
    holders = sorted({f.func.__name__ for i in plain for f in work.equations[r][i].atoms(sp.core.function.AppliedUndef)
                      if f in algebraic})
    return (f"index: the algebraic unknown '{name}'{where} is determined by no algebraic equation (they hold "
            f"{', '.join(holders) or 'no algebraic unknown'}, and none is left for {name}): the Jacobian of the "
            f"algebraic equations in the algebraic unknowns is singular, so the system is not of index 1; give "
            f"{name} an equation without derivatives (0 = ... or {name} = ...) or a derivative")


def _signed(e, show=None):  # noqa: ANN001, ANN202
    """``e`` printed by ``show`` (default ``sstr``), or ``-e`` when that reads with a leading
    plus (the constraint ``0 = e`` either way)."""
    show = show or sp.sstr
    text = show(e)
    return show(-e) if text.startswith("-") else text


def _substituted(problem, equations: list, plain: list, derived):  # noqa: ANN001, ANN202
    """The differentiated constraint with each highest derivative that a differential equation
    gives explicitly (``y' = z``) put in, when that is simple; else None."""
    swap = {}
    for i, eq in enumerate(equations):
        if i in plain:
            continue
        tops = [d for d in eq.atoms(sp.Derivative)
                if d.derivative_count == problem.orders.get(d.expr.func.__name__, -1)]
        if len(tops) != 1:
            continue
        coefficient = sp.diff(eq, tops[0])
        if coefficient == 0 or coefficient.has(sp.Derivative) or coefficient.has(tops[0]):
            continue
        swap[tops[0]] = -eq.xreplace({tops[0]: 0}) / coefficient
    if not swap or not derived.atoms(sp.Derivative) & set(swap):
        return None
    return sp.simplify(derived.xreplace(swap))
