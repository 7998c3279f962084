"""The problem classes bvpkit knows, in the order their hooks run (see :mod:`.transform`).

The order matters where one class reads what another made: added states (integrals, the
eigenvalue's normalisation) before the conditions that start them; the stretch of the
variable before the singular term is split off in the stretched variable; the truncation
of infinite ends after every finite map is known. A new class is one module and one line here.
"""

from __future__ import annotations

from .eigenvalue import Eigenvalue
from .infinite import Infinite
from .integrals import Integrals
from .periodic import Periodic
from .singular import SingularTerm
from .stretch import EndStretch

PIPELINE = (Integrals, Eigenvalue, Periodic, EndStretch, SingularTerm, Infinite)
