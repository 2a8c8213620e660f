"""Multiple endmember spectral mixture analysis (MESMA), Roberts et al. (1998).

Modules: :mod:`.selection` (the selection rule, :func:`mesma`, :func:`mesma_models`,
:class:`MesmaResult`), :mod:`.models` (candidate-model enumeration and their sum-to-one
operators), ``_solve_numba`` / ``_select_numba`` (the compiled kernels). Every public name is
importable from here: ``from unmix.mesma import mesma, mesma_models, MesmaResult``.

References
----------
Roberts, D. A., Gardner, M., Church, R., Ustin, S., Scheer, G., Green, R. O. (1998). Mapping
chaparral in the Santa Monica Mountains using multiple endmember spectral mixture models. Remote
Sensing of Environment 65(3), 267-279. https://doi.org/10.1016/S0034-4257(98)00037-6
"""

from __future__ import annotations

# the private helpers are re-exported (redundant aliases) for the cube layer, unmix.cube.mesma
from .models import SHADE as SHADE
from .models import _prepare_models as _prepare_models
from .selection import MesmaConstraint, MesmaModels, MesmaResult, mesma, mesma_models
from .selection import _check_limits as _check_limits
from .selection import _constraint as _constraint
from .selection import _run_mesma as _run_mesma

__all__ = ["MesmaConstraint", "MesmaResult", "MesmaModels", "mesma", "mesma_models"]
