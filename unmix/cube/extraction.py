"""Endmembers from a (time, band, y, x) stack: draw valid pixel-dates, then extract from them.

Cube-layer work on lazy arrays: only the drawn points of a dask-backed stack are loaded
(``vindex``), and the extraction itself runs the kernels of :mod:`unmix.extraction` on that sample.
No paths are opened, nothing is printed.
"""

from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np

from ..errors import InputError, ShapeError
from ..extraction import ExtractionMethod, extract

__all__ = ["StackSample", "sample_stack", "StackExtraction", "extract_from_stack"]


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
