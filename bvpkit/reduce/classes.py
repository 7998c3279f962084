"""The problem classes bvpkit knows, in the order their hooks run (see :mod:`.transform`).

The order matters where one class reads what another made: the algebraic equations set
aside first (the rest are made first order; later classes read ``work.constraints``);
added states (integrals, the eigenvalue's normalisation) before the conditions that start
them; the stretch of the variable before the singular term is split off in the stretched
variable; the truncation of infinite ends after every finite map is known; complex values
split last, over everything the others made. A new class is one module and one line here.
"""

from __future__ import annotations

from .algebraic import Algebraic
from .complex import Complex
from .eigenvalue import Eigenvalue
from .infinite import Infinite
from .integrals import Integrals
from .periodic import Periodic
from .singular import SingularTerm
from .stretch import EndStretch

PIPELINE = (Algebraic, Integrals, Eigenvalue, Periodic, EndStretch, SingularTerm, Infinite, Complex)
