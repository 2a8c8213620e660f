"""Endmembers by the pixel purity index (PPI) with random skewers."""

from __future__ import annotations

import numpy as np

from ..errors import InputError, ShapeError
from ._common import _angle_matrix, _prepare, _project, _subspace_gram, _top_eigvecs
from ._ppi_numba import ppi_extremes

__all__ = ["ppi", "ppi_counts"]


def ppi_counts(pixels: np.ndarray, skewers: np.ndarray) -> np.ndarray:
    """Pixel purity index counts: how often each pixel is an extreme along the given skewers.

    Every pixel is projected on every skewer; the pixel with the largest and the one with the
    smallest projection on a skewer each score one hit (first pixel on ties). The search is a
    compiled loop (numba, parallel over groups of skewers) that keeps only the running extremes,
    so no (n_pixels, n_skewers) matrix is ever stored.

    Parameters
    ----------
    pixels : (n_pixels, n_dims) ndarray
        Data (usually already reduced, e.g. by principal components); rows with NaN score nothing.
    skewers : (n_skewers, n_dims) ndarray
        Projection directions.

    Returns
    -------
    (n_pixels,) int64 ndarray
        Hits per pixel; they sum to ``2 * n_skewers``.

    References
    ----------
    Boardman, J. W., Kruse, F. A. & Green, R. O. (1995). Mapping target signatures via partial
    unmixing of AVIRIS data. Summaries of the Fifth Annual JPL Airborne Earth Science Workshop,
    JPL Publication 95-1, vol. 1, 23-26. (no DOI)

    Examples
    --------
    >>> x = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0], [0.3, 0.3]])
    >>> ppi_counts(x, np.array([[1.0, 0.0]])).tolist()
    [1, 1, 0, 0]
    """
    z = np.asarray(pixels, dtype=np.float64)
    s = np.asarray(skewers, dtype=np.float64)
    if z.ndim != 2 or s.ndim != 2 or s.shape[1] != z.shape[1]:
        raise ShapeError(
            f"pixels {z.shape} and skewers {s.shape} must be (n, d) and (k, d) with the same d"
        )
    valid = np.isfinite(z).all(axis=1)
    n = z.shape[0]
    if not valid.any():
        return np.zeros(n, dtype=np.int64)
    arg_hi, arg_lo = ppi_extremes(np.ascontiguousarray(z), np.ascontiguousarray(s.T), valid)
    hits = np.bincount(arg_hi, minlength=n) + np.bincount(arg_lo, minlength=n)
    return hits.astype(np.int64)


def _merge_candidates(
    spectra: np.ndarray, hits: np.ndarray, merge_angle: float
) -> tuple[np.ndarray, np.ndarray]:
    """Greedy clustering of candidates (already sorted by hits, descending) by spectral angle.

    A candidate joins the first cluster whose representative lies within ``merge_angle`` [rad] and
    adds its hits to it, else it starts a cluster. Returns representative positions and total hits.
    """
    reps: list[int] = []
    totals: list[int] = []
    for i in range(spectra.shape[0]):
        if reps:
            ang = _angle_matrix(spectra[i : i + 1], spectra[reps])[0]
            j = int(np.argmin(ang))
            if ang[j] <= merge_angle:
                totals[j] += int(hits[i])
                continue
        reps.append(i)
        totals.append(int(hits[i]))
    return np.asarray(reps, dtype=np.int64), np.asarray(totals, dtype=np.int64)


def ppi(
    pixels: np.ndarray,
    count: int,
    *,
    seed: int = 0,
    sample: int | None = None,
    n_skewers: int = 1000,
    merge_angle_deg: float = 3.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Endmembers by the pixel purity index (PPI) with random skewers.

    The data are reduced to their ``count - 1`` leading principal components (estimated from at
    most 250 000 random rows, applied to all), ``n_skewers`` random
    unit directions (seeded) are drawn, and :func:`ppi_counts` scores each pixel. Pixels that were
    hit are then merged, in descending order of hits, into groups of spectral angle at most
    ``merge_angle_deg`` to the group's first (most hit) pixel, summing their hits; the first pixels
    of the ``count`` groups with most hits are returned, in descending order of hits.

    Parameters
    ----------
    pixels : (n_pixels, n_bands) ndarray
        Reflectance [0..1]; rows with NaN are never chosen.
    count : int
        Number of endmembers, 2..n_bands.
    seed : int
        Seed of the skewers (and of the sample).
    sample : int or None
        Work on this many valid rows drawn at random (None: all rows).
    n_skewers : int
        Number of random skewers (default 1000).
    merge_angle_deg : float
        Candidates within this spectral angle [degree] of a more-hit candidate count as the same
        endmember (default 3).

    Returns
    -------
    spectra : (count, n_bands) ndarray
    indices : (count,) int64 ndarray

    Raises
    ------
    InputError
        If fewer than ``count`` distinct groups were hit: lower ``merge_angle_deg``, raise
        ``n_skewers`` or ask for fewer endmembers.

    References
    ----------
    Boardman, J. W., Kruse, F. A. & Green, R. O. (1995). Mapping target signatures via partial
    unmixing of AVIRIS data. Summaries of the Fifth Annual JPL Airborne Earth Science Workshop,
    JPL Publication 95-1, vol. 1, 23-26. (no DOI)

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> em = rng.uniform(0.05, 0.6, (3, 10))
    >>> x = np.vstack([em, rng.dirichlet(np.ones(3), 500) @ em])
    >>> spectra, idx = ppi(x, 3)
    >>> sorted(idx.tolist())
    [0, 1, 2]
    """
    arr, data, rows, count, rng = _prepare(pixels, count, sample, seed)
    if int(n_skewers) < 1:
        raise InputError(f"n_skewers={n_skewers} must be at least 1")
    if not 0.0 <= float(merge_angle_deg) < 90.0:
        raise InputError(f"merge_angle_deg={merge_angle_deg} must lie in [0, 90) degrees")
    mean, corr = _subspace_gram(data, rng)
    _, basis = _top_eigvecs(corr - np.outer(mean, mean), count - 1)
    z = _project(data, basis, shift=mean)
    skewers = rng.standard_normal((int(n_skewers), count - 1))
    skewers /= np.linalg.norm(skewers, axis=1, keepdims=True)
    hits = ppi_counts(z, skewers)
    cand = np.flatnonzero(hits)
    cand = cand[np.argsort(-hits[cand], kind="stable")]
    cand_spectra = np.asarray(data[cand], dtype=np.float64)
    reps, totals = _merge_candidates(cand_spectra, hits[cand], np.deg2rad(float(merge_angle_deg)))
    if reps.size < count:
        raise InputError(
            f"PPI found only {reps.size} distinct extreme pixel group(s) for count={count}; "
            "lower merge_angle_deg, raise n_skewers or ask for fewer endmembers"
        )
    order = np.argsort(-totals, kind="stable")[:count]
    chosen = rows[cand[reps[order]]]
    return arr[chosen], chosen
