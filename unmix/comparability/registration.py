"""Sub-pixel co-registration of two dates by cross-correlation of gradient fields over blocks of the scene.

Each block of each date becomes a sign-free gradient field (all bands summed, each in its own noise
units), so the correlation follows edges that last rather than levels that change with seasons and
cover; the peak is refined on an upsampled grid. Guards keep a false shift from being stated: blocks of
at least 64 pixels (a small scene gets fewer, down to one), a correlation peak that must stand out and
be precise, and blocks that must agree. What cannot be measured gets a reason, never a shift.

Sign convention (used everywhere in this package): a shift ``(dy, dx)`` is the translation that,
applied to ``moving`` with :func:`shift_image`, aligns it to ``reference``. A moving image whose
features sit 1 pixel further down than in the reference has ``dy = -1``.

References
----------
Guizar-Sicairos, M., Thurman, S. T. and Fienup, J. R. (2008). Efficient subpixel image registration
algorithms. Optics Letters 33(2), 156-158. doi:10.1364/OL.33.000156
Argyriou, V. and Vlachos, T. (2003). Estimation of sub-pixel motion using gradient cross-correlation.
Electronics Letters 39(13), 980-982. doi:10.1049/el:20030666
Granlund, G. H. (1978). In search of a general picture processing operator. Computer Graphics and Image
Processing 8(2), 155-173. doi:10.1016/0146-664X(78)90047-3
Townshend, J. R. G., Justice, C. O., Gurney, C. and McManus, J. (1992). The impact of misregistration
on change detection. IEEE Transactions on Geoscience and Remote Sensing 30(5), 1054-1060.
doi:10.1109/36.175340
"""

from __future__ import annotations

import functools
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import fft

from .orientation import SIGMA, band_noise, inside_mask, orientation_field, valid_pixels

__all__ = ["BlockShift", "ShiftEstimate", "block_shift", "block_shifts", "block_windows", "combine_block_shifts",
           "BlockField", "block_field", "field_shift", "WARN_SHIFT", "MAX_SHIFT", "MAX_PEAK_SD", "MAX_SPREAD",
           "MIN_BLOCK", "MIN_PEAK_RATIO"]

#: Shift [pixel] above which a date is worth a warning: about a fifth of a pixel keeps change error
#: under 10 % (Townshend et al. 1992; common practice).
WARN_SHIFT = 0.2
#: Default shift [pixel] above which a date is left out unless it is corrected.
MAX_SHIFT = 0.5

#: Smallest block edge [pixel]: a smaller block holds too few edges for a stable peak; a small scene is
#: measured with fewer blocks, down to one covering it, rather than smaller ones (on the 160 px scene of
#: :mod:`unmix.demo` blocks of 48 px measured 0.35-2.8 px on a registered record; a choice of this package).
MIN_BLOCK = 64
#: Correlation peak / next highest peak below which a block is not measured (see :func:`block_shift`).
MIN_PEAK_RATIO = 1.3
#: Largest precision [pixel] of a block's correlation peak (see :func:`block_shift`). The proxy (slope
#: noise over peak curvature) ignores the reference's own noise, shared by every date, so it is no error
#: bar; on the invented demo scene every block whose shift was off by more than 0.1 px had it above
#: 0.033 px, every band together stayed below 0.024 px: 0.03 px keeps the former out (a choice of this
#: package, calibrated there).
MAX_PEAK_SD = 0.03
#: Spread between blocks [pixel] above which a date's shift is not stated: the blocks disagree by more
#: than the warning level itself (:data:`WARN_SHIFT`), so the median cannot be trusted to it.
MAX_SPREAD = WARN_SHIFT

_MAD_TO_SD = 1.4826  # median absolute deviation of a normal sample -> its standard deviation


@dataclass(frozen=True)
class BlockShift:
    """Shift of one block: ``dy``, ``dx`` [pixel], the registration ``error``, a ``reason`` ('' if measured),
    the ``peak_ratio`` of the correlation peak to the next highest and the peak's precision ``peak_sd``
    [pixel] (NaN when not reached; see :func:`block_shift`)."""

    dy: float
    dx: float
    error: float
    reason: str = ""
    peak_ratio: float = np.nan
    peak_sd: float = np.nan


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


def _peak_quality(cc: np.ndarray, exclude: float) -> tuple[tuple[int, int], float, float]:
    """Position of the highest |cross-correlation| ``C`` and its quality: its ratio to the highest value further than
    ``exclude`` pixels away, and a precision [pixel] of its position: the noise of the slope of ``C``
    away from the peak (standard deviation of central differences) over the peak's curvature (second
    differences), the larger of the two axes. Distances are circular: the correlation wraps around."""
    mag = np.abs(cc)
    ny, nx = mag.shape
    py, px = np.unravel_index(int(np.argmax(mag)), mag.shape)
    dy, dx = np.abs(np.arange(ny) - py), np.abs(np.arange(nx) - px)
    dy, dx = np.minimum(dy, ny - dy), np.minimum(dx, nx - dx)
    far = np.hypot(dy[:, None], dx[None, :]) > exclude
    if not far.any():
        return (int(py), int(px)), np.inf, 0.0
    second = float(mag[far].max())
    ratio = float(mag[py, px]) / second if second > 0 else np.inf
    curv_y = 2 * mag[py, px] - mag[(py + 1) % ny, px] - mag[py - 1, px]
    curv_x = 2 * mag[py, px] - mag[py, (px + 1) % nx] - mag[py, px - 1]
    slope_y = (np.roll(mag, -1, axis=0) - np.roll(mag, 1, axis=0))[far].std() / 2
    slope_x = (np.roll(mag, -1, axis=1) - np.roll(mag, 1, axis=1))[far].std() / 2
    sd = max(slope_y / curv_y if curv_y > 0 else np.inf, slope_x / curv_x if curv_x > 0 else np.inf)
    return (int(py), int(px)), ratio, float(sd)


def block_shift(reference: np.ndarray, moving: np.ndarray, *, upsample: int = 100, min_valid: float = 0.5,
                sigma: float = SIGMA, min_peak_ratio: float = MIN_PEAK_RATIO,
                max_peak_sd: float = MAX_PEAK_SD) -> BlockShift:
    """Sub-pixel shift of one block by upsampled cross-correlation of sign-free gradient fields.

    The two dates are turned into their :func:`orientation_field` (all bands summed), cross-correlated by
    FFT, and the peak refined on an upsampled grid around it (Guizar-Sicairos et al. 2008). The block is
    not measured (a reason, NaN shift) when it has too few valid pixels, no texture, or a peak that does
    not stand out: the ratio of the highest correlation to the highest one more than ``3 sigma + 1``
    pixels away must reach ``min_peak_ratio``. A block of noise and smooth ground has a ratio near 1 and
    a random peak; one whole edge (a field, a dune front) gives 1.4 and more (measured on the invented
    scene of :mod:`unmix.demo`; a peak-to-secondary-peak test as in correlation tracking, Bolme et al.
    2010). Nor is it measured when the peak's position is imprecise: the noise of the correlation's slope
    away from the peak over the peak's curvature (the error propagation of a peak fit: position error =
    slope error / curvature) must stay within ``max_peak_sd`` (:data:`MAX_PEAK_SD`). A block without
    lasting edges, or whose edges are faint against the noise, is thus flagged as not measured, never
    given an invented shift.

    Parameters
    ----------
    reference, moving : (rows, cols) or (bands, rows, cols) ndarray
        The same window of two dates (one or several bands); NaN is no data (a pixel counts as valid when
        every band is finite on both dates).
    upsample : int
        Upsampling factor of the cross-correlation peak: the shift is resolved to 1/upsample pixel.
    min_valid : float
        Smallest share of pixels valid on both dates for the block to be measured.
    sigma : float
        Scale of the Gaussian-derivative gradients [pixel].
    min_peak_ratio : float
        Smallest ratio of the correlation peak to the highest correlation away from it.
    max_peak_sd : float
        Largest precision [pixel] of the peak's position (see above).

    Returns
    -------
    BlockShift
        ``dy``, ``dx`` [pixel] that align ``moving`` to ``reference`` (see the module's sign convention),
        the normalised root-mean-square registration error, a reason ('' when measured; otherwise the
        shift is NaN), the peak ratio and the peak's precision.

    References
    ----------
    Guizar-Sicairos, M., Thurman, S. T. and Fienup, J. R. (2008). Efficient subpixel image registration
    algorithms. Optics Letters 33(2), 156-158. doi:10.1364/OL.33.000156
    Argyriou, V. and Vlachos, T. (2003). doi:10.1049/el:20030666
    Bolme, D. S., Beveridge, J. R., Draper, B. A. and Lui, Y. M. (2010). Visual object tracking using
    adaptive correlation filters. CVPR 2010, 2544-2550. doi:10.1109/CVPR.2010.5539960

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
    reference, moving = np.asarray(reference), np.asarray(moving)
    if reference.shape != moving.shape:
        raise ValueError(f"reference and moving must be blocks of one shape, got {reference.shape} and "
                         f"{moving.shape}")
    ref = block_field(reference, sigma=sigma)
    return field_shift(ref, block_field(moving, sigma=sigma, noise=ref.noise), upsample=upsample,
                       min_valid=min_valid, sigma=sigma, min_peak_ratio=min_peak_ratio, max_peak_sd=max_peak_sd)


@dataclass(frozen=True)
class BlockField:
    """One date's block as the correlation sees it (:func:`block_field`): ``valid`` pixels, ``inside`` (valid
    and further than the filters reach from a gap or the edge), the tapered ``field`` (zero outside
    ``inside``; None when the block is empty or constant), the band ``noise`` scales, and the field's
    Fourier transform ``spectrum`` (computed when first asked for: a pair whose masks differ transforms
    the masked fields instead, see :func:`field_shift`)."""

    valid: np.ndarray
    inside: np.ndarray
    field: np.ndarray | None
    noise: np.ndarray | None = None

    @property
    def spectrum(self) -> np.ndarray | None:
        # kept in the instance's dict by hand: functools.cached_property holds one lock for every instance
        # on Python 3.11, which would queue the dates' threads; two threads may both compute it, harmlessly
        if "_spectrum" not in self.__dict__:
            self.__dict__["_spectrum"] = None if self.field is None else fft.fft2(self.field)
        return self.__dict__["_spectrum"]


def block_field(block: np.ndarray, *, sigma: float = SIGMA, noise: np.ndarray | None = None) -> BlockField:
    """What one date's block brings to the correlation, computed once per date and block.

    The :func:`orientation_field` of the block with its own gaps, Hann-tapered (against the wrap-around
    edge of the discrete Fourier transform; common practice), and its Fourier transform. Pairing two
    fields (:func:`field_shift`) zeroes each where the other is not ``inside``: the correlation then uses
    the pixels valid on both dates, as if both were computed with their common mask, so gaps of one date
    leave no unmatched structure of the other (on the invented demo scene, own masks alone let registered
    dates drift to 0.2 px, the common mask kept them within 0.05 px). A reference is thus transformed
    once for all dates, and again only for pairs where the other date has gaps. ``noise``: the band
    scales (pass the reference's ``noise`` for the other dates; default: the block's own).
    """
    block = np.asarray(block)
    if block.ndim not in (2, 3):
        raise ValueError(f"a block must be 2-D (rows, cols) or 3-D (bands, rows, cols), got shape {block.shape}")
    planes = block[None] if block.ndim == 2 else block
    valid = valid_pixels(planes)
    inside = inside_mask(valid, sigma)
    if not inside.any():
        return BlockField(valid, inside, None)
    noise = band_noise(planes, valid) if noise is None else noise
    field = orientation_field(planes, valid, sigma=sigma, noise=noise)
    if not field.any():  # constant bands (or bands without noise scale): nothing to correlate
        return BlockField(valid, inside, None, noise)
    field *= _hann(*valid.shape)
    return BlockField(valid, inside, field, noise)


@functools.lru_cache(maxsize=8)
def _hann(rows: int, cols: int) -> np.ndarray:
    """Two-dimensional Hann taper of a block (kept for the next block of the same shape)."""
    taper = np.outer(np.hanning(rows), np.hanning(cols)).astype(np.float32)
    taper.flags.writeable = False
    return taper


def _paired(one: BlockField, other: BlockField) -> np.ndarray:
    """Spectrum of ``one``'s field zeroed where ``other`` is not inside (the cached one when nothing is)."""
    if not np.any(one.inside & ~other.inside):
        return one.spectrum
    return fft.fft2(one.field * other.inside)


def _refine(product: np.ndarray, peak: tuple[int, int], upsample: int) -> tuple[float, float, float]:
    """Sub-pixel peak of the cross-correlation whose spectrum is ``product``, by the matrix-multiply DFT
    of Guizar-Sicairos et al. (2008) on a 1.5 x 1.5 pixel region upsampled ``upsample`` times around the
    integer ``peak``; returns the shift (rows, cols) in this module's convention and |correlation| there."""
    shape = np.array(product.shape)
    shift = np.array(peak, dtype=np.float64)
    shift[shift > shape // 2] -= shape[shift > shape // 2]
    if upsample <= 1:
        return float(shift[0]), float(shift[1]), np.nan
    shift = np.round(shift * upsample) / upsample
    region = int(np.ceil(upsample * 1.5))
    centre = np.fix(region / 2.0)
    offset = centre - shift * upsample
    ky, kx = (np.exp(-2j * np.pi * (np.arange(region) - off)[:, None] * fft.fftfreq(n, upsample)).astype(
        product.dtype) for n, off in zip(product.shape, offset))
    cc = (ky @ product.conj() @ kx.T).conj()  # both axes by plain matrix products
    top = np.unravel_index(int(np.argmax(np.abs(cc))), cc.shape)
    shift = shift + (np.array(top, dtype=np.float64) - centre) / upsample
    return float(shift[0]), float(shift[1]), float(np.abs(cc[top])) / product.size


def field_shift(reference: BlockField, moving: BlockField, *, upsample: int = 100, min_valid: float = 0.5,
                sigma: float = SIGMA, min_peak_ratio: float = MIN_PEAK_RATIO,
                max_peak_sd: float = MAX_PEAK_SD) -> BlockShift:
    """:func:`block_shift` from two :func:`block_field` results (the reference's computed once).

    ``min_valid`` is checked on the pixels valid on both dates; the other settings as in :func:`block_shift`.
    """
    if reference.valid.shape != moving.valid.shape:
        raise ValueError(f"reference and moving must be blocks of one shape, got {reference.valid.shape} and "
                         f"{moving.valid.shape}")
    valid = reference.valid & moving.valid
    share = float(valid.mean()) if valid.size else 0.0
    if share < min_valid:
        return BlockShift(np.nan, np.nan, np.nan,
                          f"too few valid pixels: {share:.0%} of the block, at least {min_valid:.0%} needed")
    if reference.field is None or moving.field is None:
        return BlockShift(np.nan, np.nan, np.nan, "no texture: the block is constant")
    ref_spec, mov_spec = _paired(reference, moving), _paired(moving, reference)  # each transformed once
    product = ref_spec * mov_spec.conj()
    if not np.any(product):
        return BlockShift(np.nan, np.nan, np.nan, "no texture: no gradients in the block")
    cc = fft.ifft2(product)
    peak, ratio, peak_sd = _peak_quality(cc, 3 * sigma + 1)
    if not ratio >= min_peak_ratio:
        return BlockShift(np.nan, np.nan, np.nan, f"weak correlation peak: {ratio:.2f} times the next highest, "
                          f"at least {min_peak_ratio} needed (too little lasting texture)", ratio, peak_sd)
    if not peak_sd <= max_peak_sd:
        return BlockShift(np.nan, np.nan, np.nan, f"imprecise correlation peak: about {peak_sd:.3f} px from the "
                          f"correlation's noise, at most {max_peak_sd} px allowed (too little contrast for the "
                          "noise; more bands may help)", ratio, peak_sd)
    dy, dx, top = _refine(product, peak, int(upsample))
    top = top if np.isfinite(top) else float(np.abs(cc[peak]))
    # normalised root-mean-square error of the match (Guizar-Sicairos et al. 2008, eq. 2 at the peak)
    energy = float(np.sqrt(np.sum(np.abs(ref_spec) ** 2) * np.sum(np.abs(mov_spec) ** 2))) / product.size
    error = float(np.sqrt(max(0.0, 1.0 - (top / energy) ** 2))) if energy > 0 else np.nan
    return BlockShift(dy, dx, error, "", ratio, peak_sd)


def block_windows(shape: tuple[int, int], n_blocks: int = 9, block: int = 256, *,
                  min_block: int = MIN_BLOCK) -> list[tuple[slice, slice]]:
    """Windows of ``block`` x ``block`` pixels spread evenly over a scene of ``shape`` (rows, cols).

    The layout is the squarest grid with at least ``n_blocks`` cells (3 x 3 for 9), each window centred
    in its cell. ``block`` is raised to ``min_block``; a scene too small for ``n_blocks`` such windows gets
    fewer, and a scene smaller than a block one window of the whole scene: blocks never shrink below
    ``min_block`` to make up the count (a small block holds too few edges; see :data:`MIN_BLOCK`).

    Examples
    --------
    >>> len(block_windows((2000, 2000), 9, 256))
    9
    >>> block_windows((160, 160), 9, 48)
    [(slice(8, 72, None), slice(8, 72, None)), (slice(8, 72, None), slice(88, 152, None)), \
(slice(88, 152, None), slice(8, 72, None)), (slice(88, 152, None), slice(88, 152, None))]
    """
    block = max(int(block), int(min_block))
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


def combine_block_shifts(shifts: Sequence[BlockShift], *, min_blocks: int = 3,
                         max_spread: float = MAX_SPREAD) -> ShiftEstimate:
    """Median shift and its spread between blocks.

    The spread is the median absolute deviation x 1.4826 (the larger axis; NaN from one block). A reason
    (and a NaN shift) when fewer than ``min_blocks`` blocks were measured (capped at the blocks given), or
    when the blocks disagree: spread above ``max_spread`` [pixel] (:data:`MAX_SPREAD`).
    """
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
    if sd > max_spread:
        return ShiftEstimate(np.nan, np.nan, sd, len(good),
                             f"shift not measured: the {len(good)} blocks disagree (spread {sd:.2f} px, at most "
                             f"{max_spread} px allowed; median {my:+.2f}, {mx:+.2f} px)")
    return ShiftEstimate(my, mx, sd, len(good))


def block_shifts(reference: np.ndarray, moving: np.ndarray, blocks: Sequence[tuple[slice, slice]], *,
                 upsample: int = 100, min_valid: float = 0.5, min_blocks: int = 3, sigma: float = SIGMA,
                 min_peak_ratio: float = MIN_PEAK_RATIO, max_peak_sd: float = MAX_PEAK_SD,
                 max_spread: float = MAX_SPREAD) -> ShiftEstimate:
    """Shift of ``moving`` against ``reference`` as the median over several blocks.

    Parameters
    ----------
    reference, moving : (rows, cols) or (bands, rows, cols) ndarray
        Two dates of one or several bands; NaN is no data.
    blocks : sequence of (slice, slice)
        Windows to measure (see :func:`block_windows`).
    upsample, min_valid, sigma, min_peak_ratio, max_peak_sd
        Passed to :func:`block_shift`.
    min_blocks, max_spread
        Fewest blocks that must be measured (capped at the number of blocks given) and the largest spread
        between them (:func:`combine_block_shifts`).

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
    found = [block_shift(reference[(..., *w)], moving[(..., *w)], upsample=upsample, min_valid=min_valid,
                         sigma=sigma, min_peak_ratio=min_peak_ratio, max_peak_sd=max_peak_sd) for w in blocks]
    return combine_block_shifts(found, min_blocks=min_blocks, max_spread=max_spread)
