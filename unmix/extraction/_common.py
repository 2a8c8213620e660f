"""Shared helpers of the extraction methods (private): input checks, row selection, blockwise
float64 products and leading eigenvectors.

Heavy products (band Gram matrix, projections) are computed in float64 over chunks of rows, so a
million-pixel, 200-band float32 array is never copied whole.
"""

from __future__ import annotations

import enum
from typing import Any

import numpy as np
from scipy import linalg

from ..errors import InputError, RankError, ShapeError, UnknownNameError

_CHUNK = 65536  # rows per float64 block: 65536 x 200 x 8 B = 105 MB at most
_COUNT_SAMPLE = 200_000
_SUBSPACE_SAMPLE = 250_000  # rows used to estimate the projection subspace of VCA, N-FINDR, PPI


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



def _prepare(pixels, count, sample, seed):
    arr = _check_pixels(pixels)
    rng = np.random.default_rng(seed)
    data, rows = _select_rows(arr, sample, rng, "pixels")
    count = _check_count(count, arr.shape[1], data.shape[0])
    return arr, data, rows, count, rng



def _angle_matrix(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Spectral angles [rad] between every row of ``a`` and every row of ``b``."""
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    na = np.linalg.norm(a, axis=1)
    nb = np.linalg.norm(b, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        cos = (a @ b.T) / np.outer(na, nb)
    return np.arccos(np.clip(cos, -1.0, 1.0))
