"""Count-based endmember selection (CoB): how many spectra of its own and of other classes each
candidate models within the limits.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import NamedTuple

import numpy as np

from ..errors import InputError
from .two_endmember import _check, two_endmember_models

__all__ = ["CobScores", "cob"]


class CobScores(NamedTuple):
    """Count-based scores of each candidate."""

    in_count: np.ndarray  # (n,) spectra of its own class (itself excluded) modelled within the limits
    out_count: np.ndarray  # (n,) spectra of other classes modelled within the limits
    cob_index: np.ndarray  # (n,) in_count / (out_count + 1) / n_class_other (NaN if alone)


def cob(
    spectra: np.ndarray,
    classes: Sequence[str],
    *,
    max_rmse: float = 0.025,
    fraction_range: tuple[float, float] = (-0.05, 1.05),
    shade: np.ndarray | None = None,
) -> CobScores:
    """Count-based endmember selection (CoB): how many spectra each candidate models acceptably.

    A candidate ``i`` models spectrum ``j`` acceptably when the two-endmember model (:mod:`.two_endmember`)
    has ``RMSE_ij <= max_rmse`` and ``fraction_range[0] <= f_ij <= fraction_range[1]`` (the shade
    fraction ``1 - f_ij`` then lies in the mirrored range). ``in_count`` counts such spectra of the
    candidate's own class, the candidate itself excluded; ``out_count`` those of other classes. A
    good candidate has a high ``in_count`` and a low ``out_count``. ``cob_index`` folds both into one
    number, ``in_count / (out_count + 1) / (n_class - 1)``: the share of its class the candidate
    models, damped by its confusion with other classes (our choice of a single summary; the ``+ 1``
    keeps it finite).

    Parameters
    ----------
    spectra : (n, n_bands) ndarray
        Reflectance [0..1].
    classes : (n,) sequence of str
        Class label of each spectrum.
    max_rmse : float
        Largest acceptable RMSE [reflectance] (default 0.025, Roberts et al. 1998).
    fraction_range : (float, float)
        Acceptable candidate fractions (default -0.05..1.05, Roberts et al. 1998).
    shade : (n_bands,) ndarray, optional
        Shade spectrum; default zero reflectance.

    Returns
    -------
    CobScores
        ``in_count``, ``out_count`` (int64) and ``cob_index`` (float64) per spectrum.

    References
    ----------
    Roberts, D. A., Dennison, P. E., Gardner, M. E., Hetzel, Y., Ustin, S. L. & Lee, C. T. (2003).
    Evaluation of the potential of Hyperion for fire danger assessment by comparison to the Airborne
    Visible/Infrared Imaging Spectrometer. IEEE Transactions on Geoscience and Remote Sensing
    41(6):1297-1310. doi:10.1109/TGRS.2003.812904
    Roberts, D. A., Gardner, M., Church, R., Ustin, S., Scheer, G. & Green, R. O. (1998). Mapping
    chaparral in the Santa Monica Mountains using multiple endmember spectral mixture models. Remote
    Sensing of Environment 65:267-279. doi:10.1016/S0034-4257(98)00037-6

    Examples
    --------
    >>> s = np.array([[0.2, 0.4], [0.21, 0.41], [0.4, 0.2]])
    >>> r = cob(s, ["a", "a", "b"])
    >>> r.in_count.tolist(), r.out_count.tolist()
    ([1, 1, 0], [0, 0, 0])
    """
    s, labels, sh = _check(spectra, classes, shade)
    lo, hi = (float(v) for v in fraction_range)
    if not lo < hi:
        raise InputError(f"fraction_range={fraction_range} must be (low, high) with low < high")
    if not float(max_rmse) > 0:
        raise InputError(f"max_rmse={max_rmse} must be a positive reflectance, e.g. 0.025")
    m = two_endmember_models(s, sh)
    ok = (m.rmse <= float(max_rmse)) & (m.fraction >= lo) & (m.fraction <= hi)
    same = labels[:, None] == labels[None, :]
    np.fill_diagonal(ok, False)
    in_count = (ok & same).sum(axis=1).astype(np.int64)
    out_count = (ok & ~same).sum(axis=1).astype(np.int64)
    n_other = same.sum(axis=1) - 1
    with np.errstate(invalid="ignore", divide="ignore"):
        index = np.where(n_other > 0, in_count / (out_count + 1.0) / n_other, np.nan)
    return CobScores(in_count, out_count, index)
