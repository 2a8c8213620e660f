"""Linear spectral unmixing: fractions of endmembers by (constrained) least squares.

A pixel spectrum ``x`` (n_bands) is modelled as a mixture ``x ~ M^T a`` of the endmember spectra
``M`` (n_endmembers, n_bands) with fractions ``a`` (n_endmembers). :func:`estimate_fractions`
returns, per pixel, the exact minimiser of the (optionally band-weighted) squared residual under one
of four constraint sets (:class:`Constraint`):

``"none"``
    unconstrained least squares;
``"sum-to-one"``
    fractions sum to one (closed form of Heinz & Chang 2001);
``"non-negative"``
    fractions are non-negative (NNLS, Lawson & Hanson 1974);
``"fcls"``
    fully constrained: non-negative and summing to one (Heinz & Chang 2001).

:func:`kkt_residual` certifies a solution (it is zero exactly at the optimum),
:func:`shade_normalize` removes a shade endmember, :func:`check_endmembers` validates an endmember
matrix and its conditioning.

The per-pixel work runs in one compiled (numba) loop, see :mod:`unmix.solvers._fcls_numba`.

Topic modules: :mod:`.fcls` (:func:`estimate_fractions`), :mod:`.constraints` (:class:`Constraint`),
:mod:`.diagnostics` (:func:`check_endmembers`, :func:`kkt_residual`), :mod:`.shade`
(:func:`shade_normalize`); every public name is importable from ``unmix.solvers``.
"""

from __future__ import annotations

from .constraints import Constraint
from .diagnostics import COLLINEARITY_WARN_CONDITION, RANK_ERROR_CONDITION, check_endmembers, kkt_residual
from .fcls import estimate_fractions
from .shade import shade_normalize

__all__ = [
    "Constraint",
    "estimate_fractions",
    "kkt_residual",
    "shade_normalize",
    "check_endmembers",
    "COLLINEARITY_WARN_CONDITION",
    "RANK_ERROR_CONDITION",
]
