"""Endmembers by N-FINDR: the pixels spanning the simplex of largest volume."""

from __future__ import annotations

import numpy as np

from ._common import _prepare, _project, _subspace_gram, _top_eigvecs

__all__ = ["nfindr"]


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
