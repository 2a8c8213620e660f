"""Endmembers by the automatic target generation process (ATGP)."""

from __future__ import annotations

import numpy as np

from ..errors import RankError
from ._common import _CHUNK, _prepare, _project

__all__ = ["atgp"]


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
