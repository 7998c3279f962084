"""Complex-valued problems: the Orr-Sommerfeld eigenvalue written in complex form against the
same problem split into real and imaginary parts by hand, and the critical Reynolds number
of plane Poiseuille flow as a fold of the neutral curve."""

from __future__ import annotations

import os
import time

import bvpkit

from .harness import Contender, race, table

COMPLEX = "phi'''' = 2*a**2*phi'' - a**4*phi + 1j*a*Re*((1 - y**2 - c)*(phi'' - a**2*phi) + 2*phi)"
WALLS = ["phi(-1) = 0", "phi'(-1) = 0", "phi(1) = 0", "phi'(1) = 0", "phi''(-1) = 1"]
# the same, phi = u + i v and c = cr + i ci, split by hand (what a user wrote before)
_B_RE = "((1 - y**2 - cr)*(u'' - a**2*u) + ci*(v'' - a**2*v) + 2*u)"
_B_IM = "((1 - y**2 - cr)*(v'' - a**2*v) - ci*(u'' - a**2*u) + 2*v)"
SPLIT = [f"u'''' = 2*a**2*u'' - a**4*u - a*Re*{_B_IM}", f"v'''' = 2*a**2*v'' - a**4*v + a*Re*{_B_RE}"]
SPLIT_WALLS = ["u(-1) = 0", "u'(-1) = 0", "u(1) = 0", "u'(1) = 0", "v(-1) = 0", "v'(-1) = 0", "v(1) = 0",
               "v'(1) = 0", "u''(-1) = 1", "v''(-1) = 0"]
REFERENCE = 0.23752649 + 0.00373967j  # Orszag 1971, Re = 1e4, a = 1
TOL = 1e-8


def _complex_form() -> bvpkit.Problem:
    return bvpkit.Problem([COMPLEX], WALLS, (-1, 1), independent="y", constants={"a": 1.0, "Re": 1e4},
                          unknown_parameters={"c": 0.24 + 0.004j})


def _split_form() -> bvpkit.Problem:
    return bvpkit.Problem(SPLIT, SPLIT_WALLS, (-1, 1), independent="y", constants={"a": 1.0, "Re": 1e4},
                          unknown_parameters={"cr": 0.24, "ci": 0.004})


def _cold(build, value) -> float:  # noqa: ANN001
    """Problem from text, reduction, code generation and solve, with every memo cleared (the
    disk cache is off for the whole run)."""
    from bvpkit.programs import codegen
    from bvpkit.reduce import form, prepared

    form._MEMO.clear()
    prepared._PREPARED.clear()
    codegen._MEMORY.clear()
    return value(bvpkit.solve(build(), tol=TOL))


def orr_sommerfeld() -> str:
    os.environ["BVPKIT_CACHE_DIR"] = "off"
    complex_prepared, split_prepared = bvpkit.prepare(_complex_form()), bvpkit.prepare(_split_form())

    def c_complex(sol) -> float:  # noqa: ANN001
        return abs(sol.parameters["c"] - REFERENCE) + abs(REFERENCE)

    def c_split(sol) -> float:  # noqa: ANN001
        return abs(complex(sol.parameters["cr"], sol.parameters["ci"]) - REFERENCE) + abs(REFERENCE)

    contenders = [
        Contender("split by hand: 8 real states, 2 unknowns (prepared once), solve",
                  lambda: c_split(bvpkit.solve(split_prepared, tol=TOL))),
        Contender("complex form: 1j in the equation, c complex (prepared once), solve",
                  lambda: c_complex(bvpkit.solve(complex_prepared, tol=TOL))),
        Contender("split by hand, from text (reduction and code generation included)",
                  lambda: _cold(_split_form, c_split)),
        Contender("complex form, from text (the split into parts included)", lambda: _cold(_complex_form, c_complex)),
    ]
    race(contenders, repeats=3)
    note = (f"Least stable Orr-Sommerfeld mode of plane Poiseuille flow, Re = 1e4, a = 1, tol = {TOL:g}, from the "
            "default guess of phi and c = 0.24 + 0.004i. Check value |c - c_ref| + |c_ref| against "
            "c_ref = 0.23752649 + 0.00373967i (Orszag 1971), so the relative error is |c - c_ref| / |c_ref|.")
    return table("Orr-Sommerfeld eigenvalue: complex form against a split by hand", contenders, contenders[0].name,
                 abs(REFERENCE), note)


def neutral_fold() -> str:
    problem = bvpkit.Problem([COMPLEX.replace("Re", "1000*R")], WALLS, (-1, 1), independent="y",
                             constants={"R": 5.8}, unknown_parameters={"c": 0.26, "a": 1.0})
    prepared = bvpkit.prepare(problem)
    cpu: list[float] = []

    def fold() -> float:
        started = time.process_time()
        branch = bvpkit.trace(prepared, "R", start=5.8, stop=5.7, outputs=["a"], tol=1e-6, verify=False,
                              return_to=5.78)
        cpu.append(time.process_time() - started)
        return 1000 * branch.folds[0].parameter
    contenders = [Contender("trace in R = Re/1000 of the neutral problem (c and a real unknowns), fold located",
                            fold)]
    race(contenders, repeats=1, warmup=0)
    note = ("Critical Reynolds number of plane Poiseuille flow as the fold of the neutral curve a(Re) "
            f"(Orszag 1971: 5772.22 at a = 1.02056); processor time of the trace {cpu[-1]:.1f} s.")
    return table("Critical Reynolds number by a trace of the neutral curve", contenders, contenders[0].name,
                 5772.22, note)


SECTIONS = [orr_sommerfeld, neutral_fold]
