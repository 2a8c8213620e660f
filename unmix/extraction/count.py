"""How many endmembers: HySime and the HFC virtual-dimensionality test.

Kernels on plain arrays: ``pixels`` is ``(n_pixels, n_bands)`` reflectance [0..1]; rows holding any
NaN are no data and are dropped.
"""

from __future__ import annotations

import enum

import numpy as np
from scipy import linalg, stats

from ..errors import InputError
from ._common import _COUNT_SAMPLE, _as_method, _check_pixels, _gram, _select_rows, _top_eigvecs

__all__ = ["CountMethod", "estimate_count", "hysime", "hfc"]


class CountMethod(str, enum.Enum):
    """How the number of endmembers is estimated from the data."""

    HYSIME = "hysime"
    HFC = "hfc"


def hysime(pixels: np.ndarray, *, sample: int | None = _COUNT_SAMPLE, seed: int = 0) -> int:
    """Number of endmembers by hyperspectral signal identification by minimum error (HySime).

    The noise is estimated band by band by multiple regression of each band on all the other bands;
    the signal correlation matrix is the data's minus that noise, and the signal subspace keeps each
    eigen-direction whose projected data power exceeds twice its projected noise power (the mean
    square error of keeping it is then lower than of dropping it). The data are not centred, so the
    subspace of ``p`` endmembers has dimension ``p``.

    Parameters
    ----------
    pixels : (n_pixels, n_bands) ndarray
        Reflectance [0..1]; rows with NaN are dropped.
    sample : int or None
        At most this many valid rows, drawn at random with ``seed``, are used (default 200 000);
        None uses them all. The result only depends on the band correlation matrix, so a large
        random sample gives the same answer as the full image.
    seed : int
        Seed of the random sample.

    Returns
    -------
    int
        Estimated number of endmembers (at least 1).

    References
    ----------
    Bioucas-Dias, J. M. & Nascimento, J. M. P. (2008). Hyperspectral subspace identification.
    IEEE Transactions on Geoscience and Remote Sensing 46(8):2435-2445. doi:10.1109/TGRS.2008.918089

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> em = rng.uniform(0.05, 0.6, (3, 20))
    >>> x = rng.dirichlet(np.ones(3), 5000) @ em + rng.normal(0, 1e-3, (5000, 20))
    >>> hysime(x)
    3
    """
    arr = _check_pixels(pixels)
    data, _ = _select_rows(arr, sample, np.random.default_rng(seed), "pixels")
    n_bands = data.shape[1]
    _, ry = _gram(data)
    # Regression of band i on the other bands, written with the inverse correlation matrix:
    # coefficients -G^-1[:, i] / G^-1[i, i], residual mean square 1 / G^-1[i, i].
    small = 1e-6 * np.trace(ry) / n_bands
    ginv = linalg.inv(ry + small * np.eye(n_bands))
    dinv = 1.0 / np.diag(ginv)
    resid_map = ginv * dinv[None, :]  # (I - B): noise = data @ resid_map
    rn_full = resid_map.T @ ry @ resid_map
    signal_map = np.eye(n_bands) - resid_map
    rx = signal_map.T @ ry @ signal_map
    rn = np.diag(np.diag(rn_full))  # noise taken as uncorrelated between bands, as in the paper
    rn = rn + np.trace(rx) / n_bands * 1e-5 * np.eye(n_bands)
    values, vectors = _top_eigvecs((rx + rx.T) / 2, n_bands)
    py = np.einsum("ij,ik,kj->j", vectors, ry, vectors)
    pn = np.einsum("ij,ik,kj->j", vectors, rn, vectors)
    cost = -py + 2.0 * pn
    return max(1, int(np.sum(cost < 0)))


def hfc(
    pixels: np.ndarray,
    *,
    false_alarm: float = 1e-3,
    sample: int | None = _COUNT_SAMPLE,
    seed: int = 0,
) -> int:
    """Virtual dimensionality by the Harsanyi-Farrand-Chang (HFC) eigen-threshold test.

    Eigenvalues of the sample correlation matrix (``λ``) and covariance matrix (``λ̂``), both sorted
    in descending order, are compared pair by pair: a signal source adds to the correlation
    eigenvalue but not to the covariance one. Each difference ``λ_l - λ̂_l`` is tested against zero
    with a Neyman-Pearson threshold for the false-alarm probability, taking
    ``var(λ_l - λ̂_l) ≈ 2 (λ_l² + λ̂_l²) / N``; the count of significant differences is the number of
    endmembers.

    Parameters
    ----------
    pixels : (n_pixels, n_bands) ndarray
        Reflectance [0..1]; rows with NaN are dropped.
    false_alarm : float
        False-alarm probability of each eigenvalue test, in (0, 0.5) (default 1e-3).
    sample, seed :
        As in :func:`hysime` (default: a random sample of 200 000 valid rows, seed 0).

    Returns
    -------
    int
        Estimated number of endmembers (at least 1).

    References
    ----------
    Chang, C.-I. & Du, Q. (2004). Estimation of number of spectrally distinct signal sources in
    hyperspectral imagery. IEEE Transactions on Geoscience and Remote Sensing 42(3):608-619.
    doi:10.1109/TGRS.2003.819189

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> em = rng.uniform(0.05, 0.6, (3, 20))
    >>> x = rng.dirichlet(np.ones(3), 5000) @ em + rng.normal(0, 1e-3, (5000, 20))
    >>> hfc(x) in (2, 3, 4)
    True
    """
    if not 0.0 < float(false_alarm) < 0.5:
        raise InputError(f"false_alarm={false_alarm} must lie between 0 and 0.5, e.g. 1e-3")
    arr = _check_pixels(pixels)
    data, _ = _select_rows(arr, sample, np.random.default_rng(seed), "pixels")
    n = data.shape[0]
    mean, corr = _gram(data)
    cov = corr - np.outer(mean, mean)
    lam_r = np.sort(linalg.eigvalsh(corr))[::-1]
    lam_k = np.sort(linalg.eigvalsh(cov))[::-1]
    sigma = np.sqrt(2.0 * (lam_r**2 + lam_k**2) / n)
    tau = stats.norm.isf(false_alarm) * sigma
    return max(1, int(np.sum(lam_r - lam_k > tau)))


def estimate_count(
    pixels: np.ndarray,
    *,
    method: CountMethod | str = CountMethod.HYSIME,
    sample: int | None = _COUNT_SAMPLE,
    seed: int = 0,
    false_alarm: float = 1e-3,
) -> int:
    """Number of spectrally distinct endmembers in the data.

    Parameters
    ----------
    pixels : (n_pixels, n_bands) ndarray
        Reflectance [0..1]; rows with NaN are dropped.
    method : {"hysime", "hfc"}
        :func:`hysime` (default) or :func:`hfc`.
    sample : int or None
        Use at most this many valid rows, drawn at random with ``seed`` (default 200 000).
    seed : int
        Seed of that sample.
    false_alarm : float
        False-alarm probability for ``"hfc"`` (ignored by ``"hysime"``).

    Returns
    -------
    int

    References
    ----------
    Bioucas-Dias & Nascimento (2008), doi:10.1109/TGRS.2008.918089; Chang & Du (2004),
    doi:10.1109/TGRS.2003.819189 (see :func:`hysime`, :func:`hfc`).

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> em = rng.uniform(0.05, 0.6, (4, 30))
    >>> x = rng.dirichlet(np.ones(4), 5000) @ em + rng.normal(0, 1e-3, (5000, 30))
    >>> estimate_count(x, method="hysime")
    4
    """
    method = _as_method(method, CountMethod, "count method")
    if method is CountMethod.HYSIME:
        return hysime(pixels, sample=sample, seed=seed)
    return hfc(pixels, false_alarm=false_alarm, sample=sample, seed=seed)
