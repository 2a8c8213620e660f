"""Pruning endmember bundles: which spectra of each class best represent it.

Every score here rests on the same two-endmember model: a candidate spectrum ``e_i`` models another
spectrum ``x_j`` together with photometric shade ``s`` (zero reflectance unless a ``shade`` spectrum is
given) and fractions summing to one,

    x̂_ij = f_ij e_i + (1 - f_ij) s,    f_ij = (e_i - s)·(x_j - s) / |e_i - s|²,

the least-squares fraction without bounds (fraction limits only enter :func:`cob`). With zero shade
the model is simply ``f_ij e_i``. From it:

* ``RMSE_ij = |x_j - x̂_ij| / sqrt(n_bands)`` [reflectance],
* ``angle_ij`` = spectral angle between ``x_j`` and ``x̂_ij`` [rad]; with zero shade the model is a
  multiple of ``e_i``, so this is the angle between ``x_j`` and ``e_i`` (also where ``f_ij = 0``).

All pairs are computed at once from the Gram matrix (no loop over spectra), so a library of a few
thousand spectra is pruned in well under a second.

Topic modules: :mod:`.two_endmember` (the shared model), :mod:`.ear_masa` (:func:`ear`,
:func:`masa`), :mod:`.cob` (:func:`cob`), :mod:`.selection` (:func:`select_per_class`,
:func:`prune`); every public name is importable from ``unmix.pruning``.
"""

from __future__ import annotations

from .cob import CobScores, cob
from .ear_masa import ear, masa
from .selection import PruneResult, PruningMethod, prune, select_per_class
from .two_endmember import two_endmember_models

__all__ = [
    "PruningMethod",
    "two_endmember_models",
    "ear",
    "masa",
    "CobScores",
    "cob",
    "select_per_class",
    "PruneResult",
    "prune",
]
