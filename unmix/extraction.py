"""Endmembers from the image: how many, which pixels, and which library spectra they resemble.

Every function here is a kernel on plain arrays with the band axis last: ``pixels`` is
``(n_pixels, n_bands)`` reflectance [0..1]; rows holding any NaN are no data and are never chosen.
Extraction returns spectra copied from the data (rows of ``pixels``, same dtype) together with their
row indices into the array that was passed in, so a caller can always trace an endmember back to its
pixel.

Heavy products (band Gram matrix, projections) are computed in float64 over chunks of rows, so a
million-pixel, 200-band float32 array is never copied whole; the searches themselves (VCA, N-FINDR,
ATGP, PPI) are matrix-vector products with BLAS over all pixels, no Python loop over pixels.
"""

from __future__ import annotations

import enum
from typing import Any, NamedTuple

import numpy as np
from scipy import linalg, optimize, stats

from ._extraction_numba import ppi_extremes
from .errors import BandMismatchError, InputError, RankError, ShapeError, UnknownNameError

__all__ = [
    "CountMethod",
    "ExtractionMethod",
    "estimate_count",
    "hysime",
    "hfc",
    "extract",
    "vca",
    "nfindr",
    "atgp",
    "ppi",
    "ppi_counts",
    "StackSample",
    "sample_stack",
    "StackExtraction",
    "extract_from_stack",
    "LibraryMatch",
    "match_library",
]

_CHUNK = 65536  # rows per float64 block: 65536 x 200 x 8 B = 105 MB at most
_COUNT_SAMPLE = 200_000
_SUBSPACE_SAMPLE = 250_000  # rows used to estimate the projection subspace of VCA, N-FINDR, PPI


class CountMethod(str, enum.Enum):
    """How the number of endmembers is estimated from the data."""

    HYSIME = "hysime"
    HFC = "hfc"


class ExtractionMethod(str, enum.Enum):
    """Which pixels are taken as endmembers."""

    VCA = "vca"
    NFINDR = "nfindr"
    ATGP = "atgp"
    PPI = "ppi"


# --------------------------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------------------------


def _as_method(value: Any, enum_cls: type[enum.Enum], parameter: str) -> enum.Enum:
    if isinstance(value, enum_cls):
        return value
    try:
        return enum_cls(str(value).lower())
    except ValueError:
        known = ", ".join(m.value for m in enum_cls)
        raise UnknownNameError(f"{parameter}={value!r} is not known; use one of: {known}") from None


def _check_pixels(pixels: Any, parameter: str = "pixels") -> np.ndarray:
    arr = np.asarray(pixels)
    if arr.ndim != 2:
        raise ShapeError(
            f"{parameter} must be a 2-D (n_pixels, n_bands) array, got shape {arr.shape}; "
            "reshape an image with .reshape(-1, n_bands)"
        )
    if not np.issubdtype(arr.dtype, np.floating):
        arr = arr.astype(np.float64)
    if arr.shape[1] < 2:
        raise ShapeError(f"{parameter} has {arr.shape[1]} band(s); at least 2 are needed")
    return arr


def _valid_rows(arr: np.ndarray) -> np.ndarray:
    """Indices of rows without NaN/inf, computed block by block."""
    ok = np.empty(arr.shape[0], dtype=bool)
    for start in range(0, arr.shape[0], _CHUNK):
        block = arr[start : start + _CHUNK]
        ok[start : start + _CHUNK] = np.isfinite(block).all(axis=1)
    return np.flatnonzero(ok)


def _select_rows(
    arr: np.ndarray, sample: int | None, rng: np.random.Generator, parameter: str
) -> tuple[np.ndarray, np.ndarray]:
    """Valid rows of ``arr`` (optionally a seeded random sample of them) and their indices."""
    rows = _valid_rows(arr)
    if rows.size == 0:
        raise InputError(f"{parameter} holds no pixel without NaN; check the no-data mask")
    if sample is not None:
        sample = int(sample)
        if sample < 1:
            raise InputError(f"sample={sample} must be a positive number of pixels (or None for all)")
        if sample < rows.size:
            rows = np.sort(rng.choice(rows, size=sample, replace=False))
    data = arr if rows.size == arr.shape[0] else arr[rows]
    return data, rows


def _gram(data: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean (L,) and uncentred correlation ``data.T @ data / N`` (L, L), both float64."""
    n, n_bands = data.shape
    gram = np.zeros((n_bands, n_bands))
    total = np.zeros(n_bands)
    for start in range(0, n, _CHUNK):
        block = np.asarray(data[start : start + _CHUNK], dtype=np.float64)
        gram += block.T @ block
        total += block.sum(axis=0)
    return total / n, gram / n


def _subspace_gram(data: np.ndarray, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_gram` of at most ``_SUBSPACE_SAMPLE`` random rows: enough to fix a few leading
    directions, and 4x cheaper than all rows on a million pixels. The search itself uses all rows."""
    if data.shape[0] <= _SUBSPACE_SAMPLE:
        return _gram(data)
    rows = np.sort(rng.choice(data.shape[0], size=_SUBSPACE_SAMPLE, replace=False))
    return _gram(data[rows])


def _project(data: np.ndarray, basis: np.ndarray, shift: np.ndarray | None = None) -> np.ndarray:
    """``(data - shift) @ basis`` in float64, block by block: (N, k)."""
    basis = np.asarray(basis, dtype=np.float64)
    out = np.empty((data.shape[0], basis.shape[1]))
    for start in range(0, data.shape[0], _CHUNK):
        block = np.asarray(data[start : start + _CHUNK], dtype=np.float64)
        out[start : start + _CHUNK] = block @ basis
    if shift is not None:
        out -= np.asarray(shift, dtype=np.float64) @ basis
    return out


def _top_eigvecs(matrix: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (descending) and the k leading eigenvectors of a symmetric matrix."""
    n = matrix.shape[0]
    if 0 < k < n:  # only the leading pairs: much cheaper for many bands
        values, vectors = linalg.eigh(matrix, subset_by_index=[n - k, n - 1])
    else:
        values, vectors = linalg.eigh(matrix)
    order = np.argsort(values)[::-1]
    values, vectors = values[order], vectors[:, order]
    # fix the sign so results do not depend on the LAPACK build
    signs = np.sign(vectors[np.argmax(np.abs(vectors), axis=0), np.arange(vectors.shape[1])])
    signs[signs == 0] = 1.0
    return values, (vectors * signs)[:, :k]


def _check_count(count: Any, n_bands: int, n_rows: int) -> int:
    try:
        count = int(count)
    except (TypeError, ValueError):
        raise InputError(f"count={count!r} must be a whole number of endmembers") from None
    if count < 2:
        raise InputError(f"count={count} must be at least 2 endmembers")
    if count > n_bands:
        raise RankError(
            f"count={count} endmembers cannot be separated with {n_bands} bands; "
            f"ask for at most {n_bands}"
        )
    if count > n_rows:
        raise InputError(f"count={count} is more than the {n_rows} valid pixels available")
    return count


# --------------------------------------------------------------------------------------------
# how many endmembers
# --------------------------------------------------------------------------------------------


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


# --------------------------------------------------------------------------------------------
# which pixels
# --------------------------------------------------------------------------------------------


def _prepare(pixels, count, sample, seed):
    arr = _check_pixels(pixels)
    rng = np.random.default_rng(seed)
    data, rows = _select_rows(arr, sample, rng, "pixels")
    count = _check_count(count, arr.shape[1], data.shape[0])
    return arr, data, rows, count, rng


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


def _adjugate(m: np.ndarray) -> np.ndarray:
    """Adjugate of a square matrix through its SVD (defined also when the matrix is singular)."""
    u, s, vt = np.linalg.svd(m)
    k = s.size
    prods = np.array([np.prod(np.delete(s, i)) for i in range(k)])
    return np.linalg.det(vt) * np.linalg.det(u) * (vt.T * prods) @ u.T


def _nfindr_core(
    z: np.ndarray, p: int, rng: np.random.Generator, n_restarts: int, max_sweeps: int
) -> np.ndarray:
    """Winter's simplex growing on reduced data ``z`` (N, p-1)."""
    n = z.shape[0]
    zaug = np.hstack([z, np.ones((n, 1))])
    best_idx, best_vol = None, -1.0
    for _ in range(max(1, n_restarts)):
        idx = rng.choice(n, size=p, replace=False)
        e = zaug[idx].T.copy()
        vol = abs(np.linalg.det(e))
        for _sweep in range(max_sweeps):
            changed = False
            for j in range(p):
                # det(E with column j replaced by v) = adj(E)[j, :] @ v: one product for all pixels
                cof = _adjugate(e)[j]
                vols = np.abs(zaug @ cof)
                k = int(np.argmax(vols))
                if vols[k] > vol * (1.0 + 1e-10) and k not in idx:
                    idx[j] = k
                    e[:, j] = zaug[k]
                    vol = abs(np.linalg.det(e))
                    changed = True
            if not changed:
                break
        if vol > best_vol:
            best_vol, best_idx = vol, idx.copy()
    return best_idx


def nfindr(
    pixels: np.ndarray,
    count: int,
    *,
    seed: int = 0,
    sample: int | None = None,
    n_restarts: int = 5,
    max_sweeps: int = 50,
) -> tuple[np.ndarray, np.ndarray]:
    """Endmembers by N-FINDR: the pixels spanning the simplex of largest volume.

    The data are reduced to their ``count - 1`` leading principal components (estimated from at
    most 250 000 random rows, applied to all). From ``count`` random
    pixels, each vertex in turn is replaced by the pixel that most increases the simplex volume,
    until a full sweep changes nothing. The volume with one vertex replaced is linear in the new
    pixel (a row of the adjugate), so each replacement is one matrix-vector product over all pixels.
    ``n_restarts`` seeded random starts are run and the largest simplex kept.

    Parameters
    ----------
    pixels : (n_pixels, n_bands) ndarray
        Reflectance [0..1]; rows with NaN are never chosen.
    count : int
        Number of endmembers, 2..n_bands.
    seed : int
        Seed of the random starts (and of the sample).
    sample : int or None
        Work on this many valid rows drawn at random (None: all rows).
    n_restarts : int
        Number of random starts (default 5).
    max_sweeps : int
        Upper bound on sweeps over the vertices per start (default 50; usually 2-4 are needed).

    Returns
    -------
    spectra : (count, n_bands) ndarray
    indices : (count,) int64 ndarray

    References
    ----------
    Winter, M. E. (1999). N-FINDR: an algorithm for fast autonomous spectral end-member determination
    in hyperspectral data. Proc. SPIE 3753, Imaging Spectrometry V, 266-275. doi:10.1117/12.366289

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> em = rng.uniform(0.05, 0.6, (3, 10))
    >>> x = np.vstack([em, rng.dirichlet(np.ones(3), 500) @ em])
    >>> spectra, idx = nfindr(x, 3)
    >>> sorted(idx.tolist())
    [0, 1, 2]
    """
    arr, data, rows, count, rng = _prepare(pixels, count, sample, seed)
    mean, corr = _subspace_gram(data, rng)
    _, basis = _top_eigvecs(corr - np.outer(mean, mean), count - 1)
    z = _project(data, basis, shift=mean)
    chosen = rows[_nfindr_core(z, count, rng, int(n_restarts), int(max_sweeps))]
    return arr[chosen], chosen


def _atgp_core(data: np.ndarray, p: int) -> np.ndarray:
    n = data.shape[0]
    resid = np.empty(n)
    for start in range(0, n, _CHUNK):
        block = np.asarray(data[start : start + _CHUNK], dtype=np.float64)
        resid[start : start + _CHUNK] = np.einsum("ij,ij->i", block, block)
    chosen = [int(np.argmax(resid))]
    basis = np.zeros((data.shape[1], 0))
    for _ in range(1, p):
        v = np.asarray(data[chosen[-1]], dtype=np.float64)
        for _twice in range(2):  # Gram-Schmidt, repeated for numerical orthogonality
            v = v - basis @ (basis.T @ v)
        norm = np.linalg.norm(v)
        if norm <= 0:
            raise RankError(
                "ATGP ran out of linearly independent pixels; ask for fewer endmembers (count)"
            )
        q = v / norm
        basis = np.hstack([basis, q[:, None]])
        proj = _project(data, q[:, None])[:, 0]
        resid -= proj * proj
        resid[chosen] = -np.inf
        chosen.append(int(np.argmax(resid)))
    return np.asarray(chosen, dtype=np.int64)


def atgp(
    pixels: np.ndarray, count: int, *, seed: int = 0, sample: int | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Endmembers by the automatic target generation process (ATGP).

    The first endmember is the pixel of largest norm; each next one is the pixel of largest norm in
    the orthogonal complement of the endmembers found so far. Deterministic; ``seed`` only matters
    when ``sample`` is given.

    Parameters
    ----------
    pixels : (n_pixels, n_bands) ndarray
        Reflectance [0..1]; rows with NaN are never chosen.
    count : int
        Number of endmembers, 2..n_bands.
    seed : int
        Seed of the sample.
    sample : int or None
        Work on this many valid rows drawn at random (None: all rows).

    Returns
    -------
    spectra : (count, n_bands) ndarray
    indices : (count,) int64 ndarray

    References
    ----------
    Ren, H. & Chang, C.-I. (2003). Automatic spectral target recognition in hyperspectral imagery.
    IEEE Transactions on Aerospace and Electronic Systems 39(4):1232-1249.
    doi:10.1109/TAES.2003.1261124

    Examples
    --------
    >>> x = np.array([[0.1, 0.1], [0.5, 0.1], [0.1, 0.4], [0.3, 0.25]])
    >>> atgp(x, 2)[1].tolist()
    [1, 2]
    """
    arr, data, rows, count, _ = _prepare(pixels, count, sample, seed)
    chosen = rows[_atgp_core(data, count)]
    return arr[chosen], chosen


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


def _angle_matrix(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Spectral angles [rad] between every row of ``a`` and every row of ``b``."""
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    na = np.linalg.norm(a, axis=1)
    nb = np.linalg.norm(b, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        cos = (a @ b.T) / np.outer(na, nb)
    return np.arccos(np.clip(cos, -1.0, 1.0))


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


_EXTRACTORS = {
    ExtractionMethod.VCA: vca,
    ExtractionMethod.NFINDR: nfindr,
    ExtractionMethod.ATGP: atgp,
    ExtractionMethod.PPI: ppi,
}


def extract(
    pixels: np.ndarray,
    count: int,
    *,
    method: ExtractionMethod | str = ExtractionMethod.VCA,
    seed: int = 0,
    sample: int | None = None,
    **options: Any,
) -> tuple[np.ndarray, np.ndarray]:
    """Take ``count`` endmember spectra from the data.

    Parameters
    ----------
    pixels : (n_pixels, n_bands) ndarray
        Reflectance [0..1]; rows with NaN are never chosen.
    count : int
        Number of endmembers, 2..n_bands (see :func:`estimate_count`).
    method : {"vca", "nfindr", "atgp", "ppi"}
        :func:`vca` (default), :func:`nfindr`, :func:`atgp` or :func:`ppi`.
    seed : int
        Seed of every random choice; the same seed gives the same endmembers.
    sample : int or None
        Work on this many valid rows drawn at random with ``seed`` (None: all rows).
    **options
        Passed on to the method (``snr_db``; ``n_restarts``, ``max_sweeps``; ``n_skewers``,
        ``merge_angle_deg``).

    Returns
    -------
    spectra : (count, n_bands) ndarray
        Rows of ``pixels`` (same dtype).
    indices : (count,) int64 ndarray
        Their row indices in ``pixels``: ``pixels[indices] == spectra``.

    References
    ----------
    See the method functions.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> em = rng.uniform(0.05, 0.6, (3, 10)).astype(np.float32)
    >>> x = np.vstack([em, rng.dirichlet(np.ones(3), 500).astype(np.float32) @ em])
    >>> spectra, idx = extract(x, 3, method="nfindr")
    >>> spectra.dtype, bool((x[idx] == spectra).all())
    (dtype('float32'), True)
    """
    method = _as_method(method, ExtractionMethod, "extraction method")
    func = _EXTRACTORS[method]
    try:
        return func(pixels, count, seed=seed, sample=sample, **options)
    except TypeError as exc:
        if "unexpected keyword" in str(exc):
            raise InputError(f"{exc}; see help(unmix.extraction.{func.__name__})") from None
        raise


# --------------------------------------------------------------------------------------------
# over a time stack
# --------------------------------------------------------------------------------------------


class StackExtraction(NamedTuple):
    """Endmembers taken from a (time, band, y, x) stack, with where each came from."""

    spectra: np.ndarray  # (count, n_bands)
    time_index: np.ndarray  # (count,) int64
    y: np.ndarray  # (count,) int64 row
    x: np.ndarray  # (count,) int64 column
    dates: np.ndarray | None  # (count,) the ``dates`` entries of time_index, or None
    n_sampled: int  # valid pixel-dates the endmembers were chosen from


def _take_points(values: Any, t: np.ndarray, yy: np.ndarray, xx: np.ndarray) -> np.ndarray:
    """``values[t, :, y, x]`` as a (n, band) numpy array; a dask array loads only those points."""
    if hasattr(values, "vindex"):
        out = values.vindex[t, :, yy, xx]
        return np.asarray(out.compute() if hasattr(out, "compute") else out)
    return np.asarray(values[t, :, yy, xx])


class StackSample(NamedTuple):
    """Valid pixel-dates drawn from a (time, band, y, x) stack."""

    pixels: np.ndarray  # (n, n_bands), in the stack's dtype
    time_index: np.ndarray  # (n,) int64
    y: np.ndarray  # (n,) int64
    x: np.ndarray  # (n,) int64


def sample_stack(values: Any, *, sample_size: int | None = 1_000_000, seed: int = 0) -> StackSample:
    """Draw valid pixel-dates at random from a (time, band, y, x) stack, loading only those.

    Positions (date, row, column) are drawn uniformly without replacement over the whole stack with
    ``seed``; when ``values`` is a dask array only those points are read. Pixel-dates with NaN in any
    band are dropped and, if that leaves the sample short, more are drawn (up to 8 rounds) until it
    holds ``sample_size`` valid pixel-dates or the stack is used up.

    Parameters
    ----------
    values : (n_time, n_bands, ny, nx) ndarray or dask array
        Reflectance [0..1]; NaN is no data.
    sample_size : int or None
        Number of valid pixel-dates wanted (default 1 000 000); None takes every valid one.
    seed : int
        Seed of the draw.

    Returns
    -------
    StackSample
        ``pixels`` (n, n_bands) and their ``time_index``, ``y``, ``x``, ordered as in the stack.

    Examples
    --------
    >>> cube = np.ones((2, 3, 4, 5), dtype=np.float32)
    >>> cube[0, 1, 0, 0] = np.nan
    >>> s = sample_stack(cube, sample_size=None)
    >>> s.pixels.shape, s.pixels.dtype
    ((39, 3), dtype('float32'))
    """
    shape = tuple(getattr(values, "shape", ()))
    if len(shape) != 4:
        raise ShapeError(f"stack values must be (time, band, y, x), got shape {shape}")
    n_time, _n_bands, ny, nx = shape
    rng = np.random.default_rng(seed)
    total = n_time * ny * nx
    if total == 0:
        raise InputError("the stack is empty (no date, row or column)")
    if sample_size is not None and int(sample_size) < 1:
        raise InputError(f"sample_size={sample_size} must be a positive number of pixel-dates")
    target = total if sample_size is None else min(int(sample_size), total)

    taken = np.zeros(0, dtype=np.int64)
    flat_parts: list[np.ndarray] = []
    pixel_parts: list[np.ndarray] = []
    n_valid = 0
    for _round in range(8):
        need = target - n_valid
        remaining = total - taken.size
        if need <= 0 or remaining <= 0:
            break
        if target >= total or remaining <= 2 * need:
            draw = np.setdiff1d(np.arange(total, dtype=np.int64), taken, assume_unique=True)
        else:
            # draw more than needed so NaN pixel-dates do not leave the sample short
            frac_valid = max(n_valid / taken.size, 0.05) if taken.size else 1.0
            k = min(remaining, int(np.ceil(need / frac_valid * 1.1)) + 16)
            draw = rng.choice(total, size=min(total, k + taken.size), replace=False)
            draw = draw[~np.isin(draw, taken)][:k]
        draw = np.sort(draw)
        taken = np.union1d(taken, draw)
        t, yy, xx = np.unravel_index(draw, (n_time, ny, nx))
        pix = _take_points(values, t, yy, xx)
        ok = np.isfinite(pix).all(axis=1)
        draw, pix = draw[ok], pix[ok]
        if draw.size > need:
            keep = np.sort(rng.choice(draw.size, size=need, replace=False))
            draw, pix = draw[keep], pix[keep]
        flat_parts.append(draw)
        pixel_parts.append(pix)
        n_valid += draw.size
    if n_valid == 0:
        raise InputError("every pixel-date of the stack has NaN in some band; check the no-data mask")
    flat = np.concatenate(flat_parts)
    pixels = np.concatenate(pixel_parts, axis=0)
    order = np.argsort(flat, kind="stable")
    flat, pixels = flat[order], pixels[order]
    t, yy, xx = np.unravel_index(flat, (n_time, ny, nx))
    return StackSample(pixels, t.astype(np.int64), yy.astype(np.int64), xx.astype(np.int64))


def extract_from_stack(
    values: Any,
    count: int,
    *,
    method: ExtractionMethod | str = ExtractionMethod.VCA,
    seed: int = 0,
    sample_size: int | None = 1_000_000,
    dates: Any = None,
    **options: Any,
) -> StackExtraction:
    """One set of endmembers for every date of a (time, band, y, x) stack.

    Valid pixel-dates are drawn at random over all dates, rows and columns with
    :func:`sample_stack` (only those are loaded from a dask array), and the endmembers are extracted
    from that sample with :func:`extract`, so the same spectra serve every date.

    Parameters
    ----------
    values : (n_time, n_bands, ny, nx) ndarray or dask array
        Reflectance [0..1]; NaN is no data.
    count : int
        Number of endmembers.
    method : {"vca", "nfindr", "atgp", "ppi"}
        Extraction method.
    seed : int
        Seed of the sample and of the method.
    sample_size : int or None
        Number of valid pixel-dates to extract from (default 1 000 000); None takes all.
    dates : (n_time,) array-like, optional
        Labels of the time axis, reported for each endmember.
    **options
        Passed on to the method.

    Returns
    -------
    StackExtraction
        ``spectra`` (count, n_bands) and, per endmember, ``time_index``, ``y``, ``x`` (and
        ``dates``) of the pixel-date it was taken from, and ``n_sampled``.

    References
    ----------
    See :func:`extract`.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> em = rng.uniform(0.05, 0.6, (3, 6))
    >>> cube = np.einsum("tyxk,kb->tbyx", rng.dirichlet(np.ones(3), (2, 8, 8)), em)
    >>> cube[1, :, 0, :3] = em.T
    >>> r = extract_from_stack(cube, 3, method="atgp", dates=["2020-01-01", "2020-02-01"])
    >>> sorted(r.x.tolist()), set(r.dates.tolist())
    ([0, 1, 2], {'2020-02-01'})
    """
    shape = tuple(getattr(values, "shape", ()))
    if len(shape) == 4 and dates is not None:
        dates = np.asarray(dates)
        if dates.shape != (shape[0],):
            raise ShapeError(f"dates has shape {dates.shape}; the stack has {shape[0]} dates")
    smp = sample_stack(values, sample_size=sample_size, seed=seed)
    spectra, idx = extract(smp.pixels, count, method=method, seed=seed, sample=None, **options)
    t = smp.time_index[idx]
    return StackExtraction(
        spectra=spectra,
        time_index=t,
        y=smp.y[idx],
        x=smp.x[idx],
        dates=None if dates is None else dates[t],
        n_sampled=int(smp.pixels.shape[0]),
    )


# --------------------------------------------------------------------------------------------
# matching to a library
# --------------------------------------------------------------------------------------------


class LibraryMatch(NamedTuple):
    """Match of each extracted spectrum to a reference library."""

    names: list  # library name, or None where no library spectrum lies within the threshold
    angles_deg: np.ndarray  # (n,) angle to the assigned (or, if unassigned, nearest) library spectrum
    matched: np.ndarray  # (n,) bool
    library_index: np.ndarray  # (n,) index of that library spectrum


def match_library(
    spectra: np.ndarray,
    library_spectra: np.ndarray,
    library_names: list[str] | np.ndarray,
    *,
    max_angle_deg: float = 10.0,
) -> LibraryMatch:
    """Name extracted spectra after the library spectra they resemble, one to one.

    The spectral angle between every extracted and every library spectrum is computed and an
    optimal one-to-one assignment minimising the sum of angles is found (Hungarian method,
    :func:`scipy.optimize.linear_sum_assignment`). An assigned pair counts as a match only if its
    angle is at most ``max_angle_deg``; other spectra (also those left without a partner when there
    are more spectra than library entries) are flagged unmatched and get no name.

    Parameters
    ----------
    spectra : (n, n_bands) ndarray
        Extracted spectra.
    library_spectra : (m, n_bands) ndarray
        Reference spectra on the same bands (resample the library to the sensor first).
    library_names : (m,) sequence of str
        Their names.
    max_angle_deg : float
        Largest spectral angle [degree] accepted as a match (default 10).

    Returns
    -------
    LibraryMatch
        ``names`` (str or None), ``angles_deg``, ``matched`` and ``library_index`` per spectrum.

    References
    ----------
    Kruse, F. A. et al. (1993). The spectral image processing system (SIPS): interactive
    visualization and analysis of imaging spectrometer data. Remote Sensing of Environment
    44:145-163. doi:10.1016/0034-4257(93)90013-N (spectral angle).
    Kuhn, H. W. (1955). The Hungarian method for the assignment problem. Naval Research Logistics
    Quarterly 2:83-97. doi:10.1002/nav.3800020109

    Examples
    --------
    >>> lib = np.array([[0.1, 0.2, 0.3], [0.3, 0.2, 0.1]])
    >>> m = match_library(np.array([[0.31, 0.2, 0.1], [0.5, 0.5, 0.5]]), lib, ["up", "down"],
    ...                   max_angle_deg=5)
    >>> m.names, m.matched.tolist()
    (['down', None], [True, False])
    """
    s = np.asarray(spectra, dtype=np.float64)
    lib = np.asarray(library_spectra, dtype=np.float64)
    names = list(library_names)
    if s.ndim != 2 or lib.ndim != 2:
        raise ShapeError(
            f"spectra {s.shape} and library_spectra {lib.shape} must both be (n, n_bands)"
        )
    if s.shape[1] != lib.shape[1]:
        raise BandMismatchError(
            f"spectra have {s.shape[1]} bands but the library has {lib.shape[1]}; "
            "resample the library to the sensor's bands first"
        )
    if len(names) != lib.shape[0]:
        raise ShapeError(f"{len(names)} library names for {lib.shape[0]} library spectra")
    if not (np.isfinite(s).all() and np.isfinite(lib).all()):
        raise InputError("spectra and library_spectra must not hold NaN")
    if not float(max_angle_deg) >= 0:
        raise InputError(f"max_angle_deg={max_angle_deg} must be a non-negative angle in degrees")
    n = s.shape[0]
    ang = np.rad2deg(_angle_matrix(s, lib))
    cost = np.where(np.isfinite(ang), ang, 180.0)
    out_names: list = [None] * n
    angles = np.full(n, np.nan)
    matched = np.zeros(n, dtype=bool)
    lib_index = np.full(n, -1, dtype=np.int64)
    if lib.shape[0] and n:
        row, col = optimize.linear_sum_assignment(cost)
        lib_index[:] = np.argmin(cost, axis=1)
        lib_index[row] = col
        angles = cost[np.arange(n), lib_index]
        ok = np.zeros(n, dtype=bool)
        ok[row] = cost[row, col] <= float(max_angle_deg)
        matched = ok
        out_names = [names[lib_index[i]] if ok[i] else None for i in range(n)]
    return LibraryMatch(out_names, angles, matched, lib_index)
