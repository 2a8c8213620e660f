"""Endmembers by vertex component analysis (VCA)."""

from __future__ import annotations

import numpy as np

from ._common import _prepare, _project, _subspace_gram, _top_eigvecs

__all__ = ["vca"]


def _vca_core(data: np.ndarray, p: int, rng: np.random.Generator, snr_db: float | None) -> np.ndarray:
    n, n_bands = data.shape
    mean, corr = _subspace_gram(data, rng)
    cov = corr - np.outer(mean, mean)
    cov_values, ud = _top_eigvecs(cov, p)
    if snr_db is None:
        p_y = np.trace(corr)  # mean power of the data
        p_x = np.sum(np.clip(cov_values[:p], 0, None)) + mean @ mean  # of its p-dim projection
        num, den = p_x - p / n_bands * p_y, p_y - p_x
        if den <= 0:
            snr_db = np.inf
        elif num <= 0:
            snr_db = -np.inf
        else:
            snr_db = 10.0 * np.log10(num / den)
    snr_threshold = 15.0 + 10.0 * np.log10(p)
    if snr_db < snr_threshold:
        # low SNR: project on the p-1 leading principal directions, then lift with a constant
        x = _project(data, ud[:, : p - 1], shift=mean)
        c = np.sqrt(np.max(np.sum(x * x, axis=1)))
        y = np.hstack([x, np.full((n, 1), c)])
    else:
        # high SNR: projective projection of the p-dim (uncentred) subspace onto a hyperplane
        _, ud_corr = _top_eigvecs(corr, p)
        x = _project(data, ud_corr)
        u = x.mean(axis=0)
        scale = x @ u
        scale[np.abs(scale) < 1e-300] = 1e-300
        y = x / scale[:, None]
    chosen = np.zeros(p, dtype=np.int64)
    a = np.zeros((p, p))
    a[-1, 0] = 1.0
    for i in range(p):
        w = rng.standard_normal(p)
        f = w - a @ (np.linalg.pinv(a) @ w)
        norm = np.linalg.norm(f)
        f = f / norm if norm > 0 else w / np.linalg.norm(w)
        v = y @ f
        chosen[i] = int(np.argmax(np.abs(v)))
        a[:, i] = y[chosen[i]]
    return chosen


def vca(
    pixels: np.ndarray,
    count: int,
    *,
    seed: int = 0,
    sample: int | None = None,
    snr_db: float | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Endmembers by vertex component analysis (VCA).

    The data are projected on a ``count``-dimensional subspace (estimated from at most 250 000
    random rows; the search then runs on all rows), chosen by the estimated SNR: above
    ``15 + 10 log10(count)`` dB the uncentred subspace with a projective projection, below it the
    ``count - 1`` principal directions lifted by a constant. Then, ``count`` times, the data are
    projected on a random direction orthogonal to the endmembers found so far and the extreme pixel
    is taken.

    Parameters
    ----------
    pixels : (n_pixels, n_bands) ndarray
        Reflectance [0..1]; rows with NaN are never chosen.
    count : int
        Number of endmembers, 2..n_bands.
    seed : int
        Seed of the random directions (and of the sample). Same seed, same result.
    sample : int or None
        Work on this many valid rows drawn at random (None: all rows). Pure pixels are rare, so
        sample only when the full image is too large.
    snr_db : float or None
        Signal-to-noise ratio [dB]; None estimates it from the data as in the paper.

    Returns
    -------
    spectra : (count, n_bands) ndarray
        Rows of ``pixels`` (same dtype).
    indices : (count,) int64 ndarray
        Their row indices in ``pixels``.

    References
    ----------
    Nascimento, J. M. P. & Bioucas-Dias, J. M. (2005). Vertex component analysis: a fast algorithm to
    unmix hyperspectral data. IEEE Transactions on Geoscience and Remote Sensing 43(4):898-910.
    doi:10.1109/TGRS.2005.844293

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> em = rng.uniform(0.05, 0.6, (3, 10))
    >>> x = np.vstack([em, rng.dirichlet(np.ones(3), 500) @ em])
    >>> spectra, idx = vca(x, 3)
    >>> sorted(idx.tolist())
    [0, 1, 2]
    """
    arr, data, rows, count, rng = _prepare(pixels, count, sample, seed)
    chosen = rows[_vca_core(data, count, rng, snr_db)]
    return arr[chosen], chosen
