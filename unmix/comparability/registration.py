"""Sub-pixel co-registration of two dates by phase correlation over blocks of the scene.

Sign convention (used everywhere in this package): a shift ``(dy, dx)`` is the translation that,
applied to ``moving`` with :func:`shift_image`, aligns it to ``reference``. A moving image whose
features sit 1 pixel further down than in the reference has ``dy = -1``.

References
----------
Guizar-Sicairos, M., Thurman, S. T. and Fienup, J. R. (2008). Efficient subpixel image registration
algorithms. Optics Letters 33(2), 156-158. doi:10.1364/OL.33.000156
Townshend, J. R. G., Justice, C. O., Gurney, C. and McManus, J. (1992). The impact of misregistration
on change detection. IEEE Transactions on Geoscience and Remote Sensing 30(5), 1054-1060.
doi:10.1109/36.175340
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

__all__ = ["BlockShift", "ShiftEstimate", "block_shift", "block_shifts", "block_windows", "combine_block_shifts",
           "shift_image", "WARN_SHIFT", "MAX_SHIFT"]

#: Shift [pixel] above which a date is worth a warning: about a fifth of a pixel keeps change error
#: under 10 % (Townshend et al. 1992; common practice).
WARN_SHIFT = 0.2
#: Default shift [pixel] above which a date is left out unless it is corrected.
MAX_SHIFT = 0.5

_MAD_TO_SD = 1.4826  # median absolute deviation of a normal sample -> its standard deviation


@dataclass(frozen=True)
class BlockShift:
    """Shift of one block: ``dy``, ``dx`` [pixel], the registration ``error`` and a ``reason`` ('' if measured)."""

    dy: float
    dx: float
    error: float
    reason: str = ""


@dataclass(frozen=True)
class ShiftEstimate:
    """Shift of one date from several blocks.

    ``dy``, ``dx`` are the medians over the blocks measured [pixel]; ``sd`` is the spread between blocks,
    the median absolute deviation between blocks scaled to a standard deviation (x 1.4826,
    the larger of the two axes); ``n_blocks`` the blocks measured; ``reason`` is '' when the
    estimate stands, otherwise why it does not (the shift is then NaN).
    """

    dy: float
    dx: float
    sd: float
    n_blocks: int
    reason: str = ""


def block_shift(reference: np.ndarray, moving: np.ndarray, *, upsample: int = 100,
                min_valid: float = 0.5) -> BlockShift:
    """Sub-pixel shift of one block by upsampled phase correlation.

    Parameters
    ----------
    reference, moving : (rows, cols) ndarray
        The same window of two dates; NaN is no data. Missing pixels are filled with the block's mean of
        valid pixels before correlating.
    upsample : int
        Upsampling factor of the cross-correlation peak: the shift is resolved to 1/upsample pixel.
    min_valid : float
        Smallest share of pixels valid on both dates for the block to be measured.

    Returns
    -------
    BlockShift
        ``dy``, ``dx`` [pixel] that align ``moving`` to ``reference`` (see the module's sign convention),
        the normalised root-mean-square registration error, and a reason ('' when measured; otherwise the
        shift is NaN).

    References
    ----------
    Guizar-Sicairos, M., Thurman, S. T. and Fienup, J. R. (2008). Efficient subpixel image registration
    algorithms. Optics Letters 33(2), 156-158. doi:10.1364/OL.33.000156

    Examples
    --------
    >>> import numpy as np
    >>> from scipy import ndimage
    >>> scene = ndimage.gaussian_filter(np.random.default_rng(0).random((128, 128)), 2)
    >>> moved = ndimage.shift(scene, (0.5, -1.0), mode="wrap")
    >>> s = block_shift(scene, moved)
    >>> round(s.dy, 1), round(s.dx, 1)
    (-0.5, 1.0)
    """
    from skimage.registration import phase_cross_correlation

    reference = np.asarray(reference, dtype=np.float64)
    moving = np.asarray(moving, dtype=np.float64)
    if reference.ndim != 2 or reference.shape != moving.shape:
        raise ValueError(f"reference and moving must be 2-D blocks of one shape, got {reference.shape} "
                         f"and {moving.shape}")
    valid = np.isfinite(reference) & np.isfinite(moving)
    share = float(valid.mean()) if valid.size else 0.0
    if share < min_valid:
        return BlockShift(np.nan, np.nan, np.nan,
                          f"too few valid pixels: {share:.0%} of the block, at least {min_valid:.0%} needed")
    ref = np.where(valid, reference, reference[valid].mean())
    mov = np.where(valid, moving, moving[valid].mean())
    if np.ptp(ref) == 0 or np.ptp(mov) == 0:
        return BlockShift(np.nan, np.nan, np.nan, "no texture: the block is constant")
    # Mean removed and a Hann taper against the wrap-around edge of the discrete Fourier transform; the
    # plain (not phase-normalised) cross-power spectrum, whose peak stays sharp for smooth land surfaces
    # (phase normalisation amplifies the noisy high frequencies; common practice).
    taper = np.outer(np.hanning(ref.shape[0]), np.hanning(ref.shape[1]))
    ref = (ref - ref.mean()) * taper
    mov = (mov - mov.mean()) * taper
    shift, error, _ = phase_cross_correlation(ref, mov, upsample_factor=int(upsample), normalization=None)
    return BlockShift(float(shift[0]), float(shift[1]), float(error))


def block_windows(shape: tuple[int, int], n_blocks: int = 9, block: int = 256) -> list[tuple[slice, slice]]:
    """Windows of ``block`` x ``block`` pixels spread evenly over a scene of ``shape`` (rows, cols).

    The layout is the squarest grid with at least ``n_blocks`` cells (3 x 3 for 9), each window centred
    in its cell; a scene smaller than a block gives one window of the whole scene.

    Examples
    --------
    >>> len(block_windows((2000, 2000), 9, 256))
    9
    """
    rows, cols = int(shape[0]), int(shape[1])
    side = max(1, int(np.ceil(np.sqrt(n_blocks))))
    by, bx = min(block, rows), min(block, cols)
    ny = min(side, max(1, rows // by))
    nx = min(int(np.ceil(n_blocks / ny)), max(1, cols // bx))
    windows = []
    for i in range(ny):
        y0 = int(round((i + 0.5) * rows / ny - by / 2))
        y0 = min(max(y0, 0), rows - by)
        for j in range(nx):
            x0 = int(round((j + 0.5) * cols / nx - bx / 2))
            x0 = min(max(x0, 0), cols - bx)
            windows.append((slice(y0, y0 + by), slice(x0, x0 + bx)))
    return windows[:max(n_blocks, 1)]


def combine_block_shifts(shifts: Sequence[BlockShift], *, min_blocks: int = 3) -> ShiftEstimate:
    """Median shift and its spread between blocks; a reason when fewer than ``min_blocks`` were measured."""
    good = [s for s in shifts if not s.reason]
    need = min(min_blocks, len(shifts))
    if len(good) < max(need, 1):
        reasons = sorted({s.reason for s in shifts if s.reason})
        return ShiftEstimate(np.nan, np.nan, np.nan, len(good),
                             f"shift not measured: {len(good)} of {len(shifts)} blocks measured, "
                             f"{max(need, 1)} needed ({'; '.join(reasons)})")
    dy = np.array([s.dy for s in good])
    dx = np.array([s.dx for s in good])
    my, mx = float(np.median(dy)), float(np.median(dx))
    sd = np.nan
    if len(good) > 1:
        sd = _MAD_TO_SD * max(float(np.median(np.abs(dy - my))), float(np.median(np.abs(dx - mx))))
    return ShiftEstimate(my, mx, sd, len(good))


def block_shifts(reference: np.ndarray, moving: np.ndarray, blocks: Sequence[tuple[slice, slice]], *,
                 upsample: int = 100, min_valid: float = 0.5, min_blocks: int = 3) -> ShiftEstimate:
    """Shift of ``moving`` against ``reference`` as the median over several blocks.

    Parameters
    ----------
    reference, moving : (rows, cols) ndarray
        Two dates of one band; NaN is no data.
    blocks : sequence of (slice, slice)
        Windows to measure (see :func:`block_windows`).
    upsample, min_valid
        Passed to :func:`block_shift`.
    min_blocks : int
        Fewest blocks that must be measured (capped at the number of blocks given).

    Returns
    -------
    ShiftEstimate
        Median ``dy``, ``dx`` [pixel], spread ``sd`` between blocks (median absolute deviation x 1.4826,
        the larger axis; NaN from a single block), ``n_blocks`` measured and a reason when too few were.

    References
    ----------
    Guizar-Sicairos, M., Thurman, S. T. and Fienup, J. R. (2008). doi:10.1364/OL.33.000156

    Examples
    --------
    >>> import numpy as np
    >>> from scipy import ndimage
    >>> scene = ndimage.gaussian_filter(np.random.default_rng(1).random((256, 256)), 2)
    >>> est = block_shifts(scene, ndimage.shift(scene, (0, 2.0)), block_windows(scene.shape, 4, 96))
    >>> round(est.dx, 1), est.n_blocks
    (-2.0, 4)
    """
    found = [block_shift(reference[w], moving[w], upsample=upsample, min_valid=min_valid) for w in blocks]
    return combine_block_shifts(found, min_blocks=min_blocks)


def shift_image(image: np.ndarray, dy: float, dx: float, *, order: int = 3) -> np.ndarray:
    """Resample ``image`` (last two axes rows, cols) by a sub-pixel shift ``(dy, dx)``.

    Spline interpolation (:func:`scipy.ndimage.shift`, ``order`` 1 or 3). NaN stays honest: a pixel whose
    interpolation footprint touched a missing pixel, or the outside of the image, is NaN (for cubic
    splines the footprint is widened by one pixel, where their ringing reaches).

    Parameters
    ----------
    image : (..., rows, cols) ndarray
    dy, dx : float
        Shift [pixel] in this package's convention (the shift that aligns a moving date to the reference).
    order : {1, 3}

    Returns
    -------
    (..., rows, cols) ndarray of the input's float dtype

    Examples
    --------
    >>> import numpy as np
    >>> shift_image(np.arange(5.0)[None, :], 0, 1, order=1)
    array([[nan,  0.,  1.,  2.,  3.]])
    """
    if order not in (1, 3):
        raise ValueError(f"order must be 1 or 3, got {order}")
    image = np.asarray(image)
    dtype = image.dtype if np.issubdtype(image.dtype, np.floating) else np.float64
    if dy == 0 and dx == 0:
        return image.astype(dtype, copy=True)
    if not (np.isfinite(dy) and np.isfinite(dx)):
        return np.full(image.shape, np.nan, dtype=dtype)
    flat = image.reshape((-1,) + image.shape[-2:]).astype(np.float64)
    out = np.empty(flat.shape, dtype=np.float64)
    for k, plane in enumerate(flat):
        valid = np.isfinite(plane)
        fill = plane[valid].mean() if valid.any() else 0.0
        moved = ndimage.shift(np.where(valid, plane, fill), (dy, dx), order=order, mode="nearest")
        bad = ndimage.shift((~valid).astype(np.float64), (dy, dx), order=1, mode="constant", cval=1.0) > 1e-6
        if order == 3:
            bad = ndimage.binary_dilation(bad, iterations=1)
        moved[bad] = np.nan
        out[k] = moved
    return out.reshape(image.shape).astype(dtype, copy=False)
