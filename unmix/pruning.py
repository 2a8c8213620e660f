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
"""

from __future__ import annotations

import enum
from collections.abc import Sequence
from typing import Any, NamedTuple

import numpy as np

from .errors import InputError, ShapeError, UnknownNameError

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


class PruningMethod(str, enum.Enum):
    """Bundle-pruning criterion."""

    EAR = "ear"
    MASA = "masa"
    COB = "cob"


def _check(spectra: Any, classes: Any, shade: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    s = np.asarray(spectra, dtype=np.float64)
    if s.ndim != 2:
        raise ShapeError(f"spectra must be (n_spectra, n_bands), got shape {s.shape}")
    if not np.isfinite(s).all():
        raise InputError("spectra hold NaN or infinite values; a library for pruning must be complete")
    labels = np.asarray([None if c is None else str(c) for c in classes], dtype=object)
    if labels.shape != (s.shape[0],):
        raise ShapeError(f"{labels.size} class labels for {s.shape[0]} spectra; give one label per spectrum")
    missing = [i for i, c in enumerate(labels) if c is None or c == ""]
    if missing:
        raise InputError(
            f"{len(missing)} spectra (first: row {missing[0]}) have no class label; pruning needs a class "
            "(bundle) for every spectrum: set it in the library's JSON sidecar under spectra.<name>.class"
        )
    sh = np.zeros(s.shape[1]) if shade is None else np.asarray(shade, dtype=np.float64)
    if sh.shape != (s.shape[1],):
        raise ShapeError(f"shade has shape {sh.shape}; it must be one spectrum of {s.shape[1]} bands")
    return s, labels, sh


class _Models(NamedTuple):
    fraction: np.ndarray  # (n, n) f[i, j]: candidate i modelling spectrum j
    rmse: np.ndarray  # (n, n)
    angle: np.ndarray  # (n, n) [rad]


def two_endmember_models(spectra: np.ndarray, shade: np.ndarray | None = None) -> _Models:
    """Every spectrum modelled by every other one plus shade (see the module docstring).

    Parameters
    ----------
    spectra : (n, n_bands) ndarray
        Reflectance [0..1].
    shade : (n_bands,) ndarray, optional
        Shade spectrum (default zero reflectance, i.e. photometric shade).

    Returns
    -------
    fraction, rmse, angle : (n, n) ndarray
        Row ``i`` is the candidate, column ``j`` the modelled spectrum. A candidate equal to shade
        has fraction 0 (the model is all shade). ``angle`` [rad] falls back to the angle between
        the two spectra where the model is zero; NaN only for an all-zero spectrum.

    References
    ----------
    Dennison, P. E. & Roberts, D. A. (2003). Endmember selection for multiple endmember spectral
    mixture analysis using endmember average RMSE. Remote Sensing of Environment 87:123-135.
    doi:10.1016/S0034-4257(03)00135-4

    Examples
    --------
    >>> m = two_endmember_models(np.array([[0.2, 0.2], [0.1, 0.1]]))
    >>> m.fraction.round(2).tolist(), m.rmse.round(6).tolist()
    ([[1.0, 0.5], [2.0, 1.0]], [[0.0, 0.0], [0.0, 0.0]])
    """
    s = np.asarray(spectra, dtype=np.float64)
    sh = np.zeros(s.shape[1]) if shade is None else np.asarray(shade, dtype=np.float64)
    d = s - sh  # spectra relative to shade
    g = d @ d.T  # g[i, j] = d_i . d_j
    nrm2 = np.diag(g).copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.where(nrm2[:, None] > 0, g / nrm2[:, None], 0.0)
    # |d_j - f d_i|^2 = |d_j|^2 - 2 f g_ij + f^2 |d_i|^2
    resid2 = nrm2[None, :] - 2 * f * g + f * f * nrm2[:, None]
    rmse = np.sqrt(np.clip(resid2, 0.0, None) / s.shape[1])
    # spectral angle between the spectra themselves (the model's direction under zero shade)
    norms = np.linalg.norm(s, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        angle = np.arccos(np.clip((s @ s.T) / np.outer(norms, norms), -1.0, 1.0))
    if np.any(sh != 0):
        # angle between x_j and its model x̂_ij = s + f_ij d_i
        model = sh[None, None, :] + f[:, :, None] * d[:, None, :]
        dot = np.einsum("ijb,jb->ij", model, s)
        with np.errstate(divide="ignore", invalid="ignore"):
            cos = dot / (np.linalg.norm(model, axis=2) * norms[None, :])
        model_angle = np.arccos(np.clip(cos, -1.0, 1.0))
        angle = np.where(np.isfinite(model_angle), model_angle, angle)
    return _Models(f, rmse, angle)


def _in_class_mean(values: np.ndarray, labels: np.ndarray) -> np.ndarray:
    same = labels[:, None] == labels[None, :]
    np.fill_diagonal(same, False)
    n_other = same.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(n_other > 0, np.where(same, values, 0.0).sum(axis=1) / n_other, np.nan)
    return out


def ear(spectra: np.ndarray, classes: Sequence[str], *, shade: np.ndarray | None = None) -> np.ndarray:
    """Endmember average RMSE (EAR): how well each spectrum models the rest of its class.

    ``EAR_i = mean over j in class(i), j != i, of RMSE_ij``, with ``RMSE_ij`` the root mean square
    error of modelling spectrum ``j`` by candidate ``i`` and shade with sum-to-one fractions and no
    bounds on them (the two-endmember model of the module docstring). Lower is better.

    Parameters
    ----------
    spectra : (n, n_bands) ndarray
        Reflectance [0..1] of the bundle library.
    classes : (n,) sequence of str
        Class (bundle) label of each spectrum.
    shade : (n_bands,) ndarray, optional
        Shade spectrum; default zero reflectance (photometric shade).

    Returns
    -------
    (n,) float64 ndarray
        EAR [reflectance]; NaN for a spectrum alone in its class.

    References
    ----------
    Dennison, P. E. & Roberts, D. A. (2003). Endmember selection for multiple endmember spectral
    mixture analysis using endmember average RMSE. Remote Sensing of Environment 87:123-135.
    doi:10.1016/S0034-4257(03)00135-4

    Examples
    --------
    >>> s = np.array([[0.2, 0.4], [0.3, 0.5], [0.25, 0.45]])
    >>> int(np.argmin(ear(s, ["soil", "soil", "soil"])))
    2
    """
    s, labels, sh = _check(spectra, classes, shade)
    return _in_class_mean(two_endmember_models(s, sh).rmse, labels)


def masa(spectra: np.ndarray, classes: Sequence[str], *, shade: np.ndarray | None = None) -> np.ndarray:
    """Minimum average spectral angle (MASA) score: mean angle to the rest of the class.

    ``MASA_i = mean over j in class(i), j != i, of angle_ij``, the spectral angle between spectrum
    ``j`` and its model by candidate ``i`` and shade; with zero shade this is the angle between the
    two spectra. The candidate with the smallest value is the class's MASA endmember.

    Parameters
    ----------
    spectra : (n, n_bands) ndarray
        Reflectance [0..1].
    classes : (n,) sequence of str
        Class label of each spectrum.
    shade : (n_bands,) ndarray, optional
        Shade spectrum; default zero reflectance.

    Returns
    -------
    (n,) float64 ndarray
        Mean spectral angle [rad]; NaN for a spectrum alone in its class.

    References
    ----------
    Dennison, P. E., Halligan, K. Q. & Roberts, D. A. (2004). A comparison of error metrics and
    constraints for multiple endmember spectral mixture analysis and spectral angle mapper. Remote
    Sensing of Environment 93:359-367. doi:10.1016/j.rse.2004.07.013

    Examples
    --------
    >>> s = np.array([[0.2, 0.4], [0.4, 0.2], [0.3, 0.3]])
    >>> np.rad2deg(masa(s, ["a", "a", "a"])).round(3).tolist()
    [27.652, 27.652, 18.435]
    """
    s, labels, sh = _check(spectra, classes, shade)
    return _in_class_mean(two_endmember_models(s, sh).angle, labels)


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

    A candidate ``i`` models spectrum ``j`` acceptably when the two-endmember model (module docstring)
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


def select_per_class(
    scores: np.ndarray,
    classes: Sequence[str],
    *,
    keep: int | None = 1,
    threshold: float | None = None,
    higher_is_better: bool = False,
) -> np.ndarray:
    """Indices of the best-scoring spectra of each class.

    Within each class, spectra are ranked by ``scores`` (ascending, or descending with
    ``higher_is_better``; ties keep library order; NaN ranks last). With ``threshold`` only spectra
    scoring at most (or, with ``higher_is_better``, at least) ``threshold`` qualify; ``keep`` then
    caps how many per class are kept (None: all that qualify). A class whose only spectrum has a NaN
    score (it is alone) keeps it, unless a threshold is given.

    Parameters
    ----------
    scores : (n,) ndarray
        One score per spectrum (from :func:`ear`, :func:`masa`, or ``cob(...).cob_index``).
    classes : (n,) sequence of str
        Class labels.
    keep : int or None
        Spectra kept per class (default 1).
    threshold : float, optional
        Score limit.
    higher_is_better : bool
        Rank descending (for count-based scores).

    Returns
    -------
    (k,) int64 ndarray
        Kept indices, in library order.

    Examples
    --------
    >>> select_per_class(np.array([0.3, 0.1, 0.2, 0.5]), ["a", "a", "a", "b"], keep=2).tolist()
    [1, 2, 3]
    """
    sc = np.asarray(scores, dtype=np.float64)
    labels = np.asarray([str(c) for c in classes], dtype=object)
    if sc.shape != labels.shape or sc.ndim != 1:
        raise ShapeError(f"{sc.size} scores for {labels.size} class labels; give one of each per spectrum")
    if keep is not None and int(keep) < 1:
        raise InputError(f"keep={keep} must be at least 1 spectrum per class (or None for no cap)")
    key = -sc if higher_is_better else sc.copy()
    key = np.where(np.isnan(key), np.inf, key)
    kept: list[int] = []
    for label in dict.fromkeys(labels.tolist()):
        members = np.flatnonzero(labels == label)
        order = members[np.argsort(key[members], kind="stable")]
        if threshold is not None:
            t = float(threshold)
            good = sc[order] >= t if higher_is_better else sc[order] <= t
            order = order[good]
        if keep is not None:
            order = order[: int(keep)]
        kept.extend(order.tolist())
    return np.asarray(sorted(kept), dtype=np.int64)


class PruneResult(NamedTuple):
    """Outcome of :func:`prune`."""

    indices: np.ndarray  # (k,) kept spectra, in library order
    scores: np.ndarray  # (n,) the ranking score of every spectrum
    details: dict  # all per-spectrum score arrays computed


def prune(
    spectra: np.ndarray,
    classes: Sequence[str],
    *,
    method: PruningMethod | str = PruningMethod.EAR,
    keep: int | None = 1,
    threshold: float | None = None,
    shade: np.ndarray | None = None,
    max_rmse: float = 0.025,
    fraction_range: tuple[float, float] = (-0.05, 1.05),
) -> PruneResult:
    """Keep the best ``keep`` spectra of each class by EAR, MASA or CoB.

    * ``"ear"``: lowest :func:`ear` first.
    * ``"masa"``: lowest :func:`masa` first (``threshold`` in radians).
    * ``"cob"``: highest ``in_count`` of :func:`cob` first, then lowest ``out_count``, then lowest
      EAR; ``threshold`` is a minimum ``in_count``. Ranking score reported: ``cob_index``.

    Parameters
    ----------
    spectra : (n, n_bands) ndarray
    classes : (n,) sequence of str
    method : {"ear", "masa", "cob"}
    keep : int or None
        Spectra kept per class (default 1; None keeps all that pass ``threshold``).
    threshold : float, optional
        See above.
    shade : (n_bands,) ndarray, optional
        Shade spectrum; default zero reflectance.
    max_rmse, fraction_range :
        Limits of :func:`cob`.

    Returns
    -------
    PruneResult

    References
    ----------
    See :func:`ear`, :func:`masa`, :func:`cob`.

    Examples
    --------
    >>> s = np.array([[0.2, 0.4], [0.3, 0.5], [0.25, 0.45], [0.5, 0.1]])
    >>> prune(s, ["soil", "soil", "soil", "veg"], method="ear").indices.tolist()
    [2, 3]
    """
    try:
        method = method if isinstance(method, PruningMethod) else PruningMethod(str(method).lower())
    except ValueError:
        known = ", ".join(m.value for m in PruningMethod)
        raise UnknownNameError(f"pruning method {method!r} is not known; use one of: {known}") from None
    s, labels, sh = _check(spectra, classes, shade)
    if method is PruningMethod.EAR:
        sc = ear(s, labels, shade=sh)
        return PruneResult(select_per_class(sc, labels, keep=keep, threshold=threshold), sc, {"ear": sc})
    if method is PruningMethod.MASA:
        sc = masa(s, labels, shade=sh)
        return PruneResult(select_per_class(sc, labels, keep=keep, threshold=threshold), sc, {"masa": sc})
    c = cob(s, labels, max_rmse=max_rmse, fraction_range=fraction_range, shade=sh)
    e = ear(s, labels, shade=sh)
    # rank: in_count desc, out_count asc, EAR asc -> one sortable rank number
    order = np.lexsort((np.where(np.isnan(e), np.inf, e), c.out_count, -c.in_count))
    rank = np.empty(len(order), dtype=np.float64)
    rank[order] = np.arange(len(order))
    kept = select_per_class(rank, labels, keep=keep)
    if threshold is not None:
        kept = kept[c.in_count[kept] >= float(threshold)]
    return PruneResult(
        kept,
        c.cob_index,
        {"in_count": c.in_count, "out_count": c.out_count, "cob_index": c.cob_index, "ear": e},
    )
