"""Pruning endmember bundles: which spectra of each class best represent it.

Every score rests on one two-endmember model (a candidate spectrum plus photometric shade, fractions
summing to one, least-squares fraction without bounds), computed for all pairs at once from the Gram
matrix: see :mod:`.two_endmember`.

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
