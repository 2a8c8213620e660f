"""Choosing the spectra kept per class from the pruning scores, and :func:`prune`, which runs one
criterion (EAR, MASA or CoB) end to end.
"""

from __future__ import annotations

import enum
from collections.abc import Sequence
from typing import NamedTuple

import numpy as np

from ..errors import InputError, ShapeError, UnknownNameError
from .cob import cob
from .ear_masa import ear, masa
from .two_endmember import _check

__all__ = ["PruningMethod", "select_per_class", "PruneResult", "prune"]


class PruningMethod(str, enum.Enum):
    """Bundle-pruning criterion."""

    EAR = "ear"
    MASA = "masa"
    COB = "cob"


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
