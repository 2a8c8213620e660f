"""Comparability of the dates of a lazy cube: co-registration and relative radiometric normalisation.

Maps the kernels of :mod:`unmix.comparability` over a (time, band, y, x) cube. Measuring reads only
what it needs: a few blocks (of the registration bands, or of every band when the radiometric sample is
drawn from them too), one task per date, and a fixed sample of pixels for the radiometry
(:mod:`unmix.cube.radiometry` fits it, within each sensor of a record that switches sensor). Corrections
stay lazy. No paths, no printing.

References
----------
Guizar-Sicairos, M., Thurman, S. T. and Fienup, J. R. (2008). doi:10.1364/OL.33.000156
Argyriou, V. and Vlachos, T. (2003). doi:10.1049/el:20030666
Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013
"""

from __future__ import annotations

import dask
import dask.array as da
import numpy as np
import xarray as xr

from unmix.comparability import (
    GAIN_TOLERANCE,
    MAX_PEAK_SD,
    MAX_SHIFT,
    MAX_SPREAD,
    MIN_PEAK_RATIO,
    MIN_R2,
    SIGMA,
    WARN_SHIFT,
    block_field,
    block_windows,
    combine_block_shifts,
    field_shift,
    valid_pixels,
)
from unmix.cube.corrections import correct_registration, normalise_cube
from unmix.cube.plausible import screen_block
from unmix.cube.radiometry import MIN_INVARIANT, SAMPLE, fit_sample, one_blas_thread, sample_scene, window_picks
from unmix.cube.radiometry import date_label as _date_label
from unmix.errors import UnknownNameError

#: Registration blocks by default: 4 of 256 px (a 2 x 2 layout). Each block costs the decoding of the
#: tile it lies in on every date, plus its gradient fields; 4 blocks keep measuring within 15 % of
#: unmixing (benchmarks/bench_comparability.py), still give a median and a spread, and the 3 needed
#: (``min_blocks``) leave one block to a cloud or to featureless ground.
N_BLOCKS = 4

#: Most memory [bytes] the measuring blocks of every date may take when the reference date is chosen from
#: them (no reference given): up to this, the blocks are read once, kept while the date with most valid
#: pixels is found, and measured from memory; beyond it they are read twice (counted, then measured),
#: so memory stays bounded. 1 GiB holds the 4 blocks of 256 px x 6 bands of 160 dates (a choice of this
#: package).
BLOCK_MEMORY = 1 << 30

__all__ = ["reference_date", "block_layout", "measure_registration", "measure_radiometry", "measure_comparability",
           "registration_verdict", "correct_registration", "normalise_cube"]


def reference_date(cube: xr.DataArray, preferred=None):
    """The reference date: ``preferred`` if given (it must be a date of the cube), else the date with most
    valid pixel-bands over the whole cube (a lazy reduction that reads every chunk; the measures below
    choose from the blocks they read instead, see :func:`measure_comparability`).

    Raises
    ------
    UnknownNameError
        ``preferred`` is not a date of the cube (the message names the nearest dates).
    """
    times = cube["time"].values
    if preferred is not None:
        want = np.datetime64(preferred, "ns") if np.issubdtype(times.dtype, np.datetime64) else preferred
        hit = np.flatnonzero(times == want)
        if hit.size:
            return times[hit[0]]
        if np.issubdtype(times.dtype, np.datetime64):
            order = np.argsort(np.abs((times - want).astype("timedelta64[s]").astype(np.int64)))[:3]
        else:
            order = np.arange(min(3, times.size))
        near = ", ".join(_date_label(times[i]) for i in sorted(order))
        raise UnknownNameError(f"reference date {_date_label(want)} is not a date of the stack; nearest dates: "
                               f"{near}. Give one of the stack's dates.")
    counts = cube.notnull().sum(dim=[d for d in cube.dims if d != "time"]).compute()
    return times[int(np.argmax(counts.values))]


def _snap(starts: list[int], size: int, chunks: tuple[int, ...]) -> list[int]:
    """Move each window of ``size`` inside the chunk holding its centre when it fits, so a window reads
    one chunk instead of up to four."""
    edges = np.concatenate([[0], np.cumsum(chunks)])
    out = []
    for s in starts:
        k = int(np.searchsorted(edges, s + size / 2, side="right")) - 1
        lo, hi = int(edges[max(k, 0)]), int(edges[min(k + 1, len(edges) - 1)])
        out.append(min(max(s, lo), hi - size) if hi - lo >= size else s)
    return out


def block_layout(cube: xr.DataArray, n_blocks: int = N_BLOCKS, block: int = 256) -> list[tuple[slice, slice]]:
    """Windows of :func:`unmix.comparability.block_windows`, each moved inside one chunk of a dask cube."""
    wins = block_windows((cube.sizes["y"], cube.sizes["x"]), n_blocks, block)
    if not isinstance(cube.data, da.Array):
        return wins
    ax_y, ax_x = cube.dims.index("y"), cube.dims.index("x")
    ys = _snap([w[0].start for w in wins], wins[0][0].stop - wins[0][0].start, cube.data.chunks[ax_y])
    xs = _snap([w[1].start for w in wins], wins[0][1].stop - wins[0][1].start, cube.data.chunks[ax_x])
    return [(slice(y, y + w[0].stop - w[0].start), slice(x, x + w[1].stop - w[1].start))
            for y, x, w in zip(ys, xs, wins)]


def _band_indices(cube: xr.DataArray, band) -> list[int]:
    """Positions of the registration band(s): one name, several, or None for every band."""
    bands = [str(b) for b in cube["band"].values]
    if band is None:
        return list(range(len(bands)))
    wanted = [band] if isinstance(band, (str, bytes)) or np.ndim(band) == 0 else list(band)
    missing = [str(w) for w in wanted if str(w) not in bands]
    if missing or not wanted:
        raise UnknownNameError(f"band {', '.join(repr(m) for m in missing) or '(none)'} for co-registration is not "
                               f"in the stack; its bands are {', '.join(bands)}. Choose among them (or all).")
    return [bands.index(str(w)) for w in wanted]


def _band_index(cube: xr.DataArray, band) -> int:
    return _band_indices(cube, band)[0]


def _fields(blocks, bands, sigma, like=None):
    """Fields of the blocks; with ``like`` (the reference's fields) each band weighed by the reference's
    noise scale, so both fields of a pair weigh the bands alike (and noise is estimated once)."""
    like = like or [None] * len(blocks)
    return [block_field(b[bands], sigma=sigma, noise=None if r is None else r.noise) for b, r in zip(blocks, like)]


def _date_task(ref_fields, blocks, *, bands, picks, settings):
    """One date against the reference: its shift over the blocks (``bands`` only), the valid share of the
    blocks and its sampled pixels (band, pixel) from the same read (``picks``: pixel indices per block)."""
    found = None
    if ref_fields is not None:
        mine = _fields(blocks, bands, settings["block"]["sigma"], like=ref_fields)
        found = combine_block_shifts([field_shift(r, m, **settings["block"]) for r, m in zip(ref_fields, mine)],
                                     **settings["combine"])
        masks = [f.valid for f in mine]
    else:
        masks = [valid_pixels(b[bands]) for b in blocks]
    valid = sum(int(m.sum()) for m in masks) / max(1, sum(m.size for m in masks))
    sample = None
    if picks is not None:
        sample = np.concatenate([b.reshape(b.shape[0], -1)[:, k] for b, k in zip(blocks, picks)], axis=1)
    return found, valid, sample


def _block_reads(cube: xr.DataArray, windows, valid_range=None) -> list:
    """One delayed list of (band, y, x) blocks per date: the windows of every band of ``cube``, pixels with
    a band outside ``valid_range`` (low, high) set to NaN.

    Each window is sliced once over all dates (one chunk per date, its chunk's read, sliced), rather than
    once per date: on 40 dates and 4 windows, 160 slices took 0.3 s to build before anything was read.
    The range is applied to the blocks, not to the cube, so only the blocks' pixels are compared.
    """
    data = cube.transpose("time", "band", "y", "x").data
    n_t = cube.sizes["time"]
    if not isinstance(data, da.Array):
        return [dask.delayed(_date_blocks)([data[t:t + 1, :, wy, wx] for wy, wx in windows], valid_range)
                for t in range(n_t)]
    per_window = [data[:, :, wy, wx].rechunk((1, -1, -1, -1)).to_delayed().reshape(n_t) for wy, wx in windows]
    return [dask.delayed(_date_blocks)([blocks[t] for blocks in per_window], valid_range) for t in range(n_t)]


def _date_blocks(chunks: list, valid_range) -> list:
    """The (band, y, x) block of each one-date chunk (1, band, y, x); pixels with a band outside
    ``valid_range`` screened as unmixing screens them (:func:`unmix.cube.plausible.screen_block`)."""
    blocks = [np.asarray(c[0]) for c in chunks]
    if valid_range is None:
        return blocks
    # band last for the screen (the reader's own layout: no copy); integers become float32 to hold NaN
    return [screen_block((b if b.dtype.kind == "f" else b.astype(np.float32)).transpose(1, 2, 0),
                         valid_range)[0].transpose(2, 0, 1) for b in blocks]


def _valid_count(blocks) -> int:
    """Valid (finite) pixel-bands of a date's blocks."""
    return sum(int(np.count_nonzero(np.isfinite(b))) for b in blocks)


def _reference_index(cube: xr.DataArray, reference, reads: list, windows, memory: int) -> tuple[int, list, str]:
    """(position of the reference date, the reads to measure from, how the reference was chosen).

    A given ``reference`` is checked by :func:`reference_date`. Without one, the date with most valid
    pixel-bands in the blocks: the blocks of every date are read and kept (``persist``) when they fit in
    ``memory`` bytes, so measuring reads nothing again; otherwise they are only counted, and read again
    by the measuring tasks.
    """
    times = cube["time"].values
    if reference is not None:
        return int(np.flatnonzero(times == reference_date(cube, reference))[0]), reads, "given"
    area = sum((wy.stop - wy.start) * (wx.stop - wx.start) for wy, wx in windows)
    if times.size * cube.sizes["band"] * area * cube.dtype.itemsize <= memory:
        reads = list(dask.persist(*reads))
    counts = dask.compute(*[dask.delayed(_valid_count)(r) for r in reads])
    return int(np.argmax(counts)), reads, "most valid pixels in the measured blocks"


def _measure_dates(reads: list, i_ref: int, *, bands, picks, settings):
    """The per-date tasks over the blocks, computed together: each date's blocks (``reads``) are read by its
    own task, the reference's once (one delayed object, shared by its fields and its own date's task; its
    fields transformed once for all dates), so memory holds the reference's fields and the dates in flight."""
    ref_fields = dask.delayed(_fields)(reads[i_ref], bands, settings["block"]["sigma"])
    tasks = [dask.delayed(_date_task)(None if t == i_ref else ref_fields, reads[t], bands=bands, picks=picks,
                                      settings=settings)
             for t in range(len(reads))]
    with one_blas_thread():
        return dask.compute(*tasks)


def _registration_settings(upsample, min_valid, min_blocks, sigma, min_peak_ratio, max_peak_sd, max_spread) -> dict:
    return {"block": dict(upsample=upsample, min_valid=min_valid, sigma=sigma, min_peak_ratio=min_peak_ratio,
                          max_peak_sd=max_peak_sd),
            "combine": dict(min_blocks=min_blocks, max_spread=max_spread)}


def _shift_dataset(times, results, i_ref, *, band_names, block, n_windows, settings, chosen) -> xr.Dataset:
    n_t = len(times)
    out = {k: np.full(n_t, np.nan) for k in ("shift_y", "shift_x", "shift_sd")}
    count = np.zeros(n_t, dtype=np.int64)
    reason = np.full(n_t, "", dtype=object)
    for t, (est, _, _) in enumerate(results):
        if t == i_ref:
            out["shift_y"][t] = out["shift_x"][t] = out["shift_sd"][t] = 0.0
            count[t] = n_windows
            continue
        out["shift_y"][t], out["shift_x"][t], out["shift_sd"][t] = est.dy, est.dx, est.sd
        count[t], reason[t] = est.n_blocks, est.reason
    attrs = {"units": "pixel"}
    valid = np.array([v for _, v, _ in results], dtype=np.float32)
    return xr.Dataset(
        {"valid_share": ("time", valid,
                         {"long_name": "share of valid pixels in the measured blocks", "units": "1"}),
         "shift_y": ("time", out["shift_y"], {**attrs, "long_name": "row shift aligning the date to the reference"}),
         "shift_x": ("time", out["shift_x"], {**attrs, "long_name": "column shift aligning the date to the reference"}),
         "shift_sd": ("time", out["shift_sd"], {**attrs, "long_name": "spread of the shift between blocks "
                                                "(median absolute deviation x 1.4826)"}),
         "n_blocks": ("time", count, {"long_name": "blocks measured"}),
         "reason": ("time", reason.astype(str), {"long_name": "why the shift was not measured ('' if it was)"})},
        coords={"time": times},
        attrs={"method": "cross-correlation of sign-free gradient fields, upsampled peak (Argyriou & Vlachos "
                         "2003; Guizar-Sicairos et al. 2008)", "band": ",".join(band_names),
               "reference": _date_label(times[i_ref]), "reference_index": i_ref, "reference_choice": chosen,
               "block": block, "n_blocks": n_windows,
               "upsample": settings["block"]["upsample"], "min_peak_ratio": settings["block"]["min_peak_ratio"],
               "max_peak_sd": settings["block"]["max_peak_sd"],
               "max_spread": settings["combine"]["max_spread"]})


def measure_registration(cube: xr.DataArray, *, band, reference, n_blocks: int = N_BLOCKS, block: int = 256,
                         upsample: int = 20, min_valid: float = 0.5, min_blocks: int = 3, sigma: float = SIGMA,
                         min_peak_ratio: float = MIN_PEAK_RATIO, max_peak_sd: float = MAX_PEAK_SD,
                         max_spread: float = MAX_SPREAD, memory: int = BLOCK_MEMORY,
                         valid_range: tuple[float, float] | None = None) -> xr.Dataset:
    """Sub-pixel shift of every date against ``reference`` by correlating gradient fields over blocks.

    Only ``n_blocks`` windows of ``block`` x ``block`` pixels (at least :data:`~unmix.comparability.MIN_BLOCK`;
    a small scene gets fewer blocks, down to one covering it) of the registration band(s) are read, spread
    over the scene, each inside one chunk where it fits; one task per date, so memory holds the
    reference's blocks and the dates in flight.

    Parameters
    ----------
    cube : (time, band, y, x) DataArray
    band : str, sequence of str or None
        Band(s) to correlate (band names of the cube); None: every band. Several bands are summed as
        sign-free gradient fields in noise units (:func:`unmix.comparability.orientation_field`), which
        measures scenes whose edges show in some bands only (on the invented demo scene every band together
        keeps registered dates within 0.05 px, the near-infrared alone within about 0.2 px).
    reference : date or None
        Reference date (a date of the cube); None: the date with most valid pixel-bands in the blocks,
        found from the same read when the blocks of every date fit in ``memory`` bytes (else they are
        read twice).
    n_blocks, block, upsample, min_valid, min_blocks, sigma, min_peak_ratio, max_peak_sd, max_spread
        Layout of the blocks and the kernel's settings (:func:`unmix.comparability.block_shifts`).
    memory : int
        Bytes the blocks of every date may take while the reference is chosen (:data:`BLOCK_MEMORY`).
    valid_range : (float, float), optional
        Pixels with a band outside it are no data for the measures (an undeclared fill value such as
        1e30), screened in the blocks read.

    Returns
    -------
    Dataset on ``time``
        ``shift_y``, ``shift_x`` [pixel] (the shift that aligns the date to the reference), ``shift_sd``
        [pixel] (spread between blocks: median absolute deviation x 1.4826), ``n_blocks`` measured,
        ``valid_share`` of the blocks and ``reason`` ('' when measured, else why not; the shift is then
        NaN: too few valid pixels, no lasting texture, blocks that disagree). Attributes ``reference``,
        ``reference_index`` (its position in the cube) and ``reference_choice`` ('given' or how it was chosen).

    Raises
    ------
    UnknownNameError
        The band or the reference date is not in the cube.

    References
    ----------
    Guizar-Sicairos, M., Thurman, S. T. and Fienup, J. R. (2008). doi:10.1364/OL.33.000156
    Argyriou, V. and Vlachos, T. (2003). doi:10.1049/el:20030666
    """
    idx = _band_indices(cube, band)
    windows = block_layout(cube, n_blocks, block)
    sub = cube.isel(band=idx)
    i_ref, reads, chosen = _reference_index(sub, reference, _block_reads(sub, windows, valid_range), windows, memory)
    settings = _registration_settings(upsample, min_valid, min_blocks, sigma, min_peak_ratio, max_peak_sd,
                                      max_spread)
    results = _measure_dates(reads, i_ref, bands=list(range(len(idx))), picks=None, settings=settings)
    return _shift_dataset(cube["time"].values, results, i_ref, band_names=[str(b) for b in sub["band"].values],
                          block=block, n_windows=len(windows), settings=settings, chosen=chosen)


def registration_verdict(shifts: xr.Dataset, *, warn: float = WARN_SHIFT, max_shift: float = MAX_SHIFT) -> xr.DataArray:
    """Per date: 'ok', 'warn' (shift above ``warn`` px), 'exclude' (above ``max_shift`` px) or 'failed'."""
    size = np.hypot(shifts["shift_y"].values, shifts["shift_x"].values)
    verdict = np.where(size > max_shift, "exclude", np.where(size > warn, "warn", "ok")).astype(object)
    verdict[shifts["reason"].values != ""] = "failed"
    return xr.DataArray(verdict.astype(str), coords={"time": shifts["time"].values}, dims="time",
                        attrs={"warn": warn, "max_shift": max_shift, "units_of_levels": "pixel"})


def measure_radiometry(cube: xr.DataArray, *, reference, by: str | None = None, sample: int = SAMPLE, seed: int = 0,
                       threshold: float = 0.95, min_pixels: int = MIN_INVARIANT, min_r2: float = MIN_R2,
                       gain_tolerance: float = GAIN_TOLERANCE,
                       valid_range: tuple[float, float] | None = None) -> xr.Dataset:
    """Gain and offset per date and band that map the date onto a reference date (pseudo-invariant pixels).

    A fixed random sample of ``sample`` pixels over the scene (the same on every date, ``seed``) is read;
    for each date the pixels valid on it and on its reference enter IR-MAD, those whose no-change
    probability exceeds ``threshold`` are fitted per band by orthogonal regression
    (:func:`unmix.comparability.fit_date`). :func:`measure_comparability` draws the sample from the
    registration blocks instead, reading the stack once for both.

    Parameters
    ----------
    cube : (time, band, y, x) DataArray
    reference : date or None
        Reference date (a date of the cube); None: the date with most valid pixel-bands in the sample.
    by : str, optional
        Time coordinate grouping the dates (e.g. ``"sensor"``): each group is fitted within itself, the
        reference's group against ``reference``, every other group against its date with most sampled
        pixels valid in every band (:func:`unmix.cube.radiometry.fit_sample`). None: one group.
    sample, seed, threshold, min_pixels, min_r2, gain_tolerance
        The sample and the fit's settings.
    valid_range : (float, float), optional
        Sampled pixels with a band outside it are no data.

    Returns
    -------
    Dataset
        On (time, band): ``gain``, ``offset``, ``gain_se``, ``offset_se``, ``r2``; on time: ``n``
        (invariant pixels), ``flag`` ('' when fine, else the reason: poor fit, gain far from 1, too
        few pixels) and ``reference`` (the date fitted against). A reference date has gain 1 and offset 0.

    References
    ----------
    Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013
    """
    values, _ = screen_block(sample_scene(cube, sample, seed), valid_range)  # (time, pixel, band)
    if reference is None:  # the date with most valid pixel-bands in the sample: nothing more to read
        i_ref = int(np.argmax(np.isfinite(values).sum(axis=(1, 2))))
    else:
        i_ref = int(np.flatnonzero(cube["time"].values == reference_date(cube, reference))[0])
    fits = fit_sample(cube, values, i_ref, by=by, seed=seed, threshold=threshold, min_pixels=min_pixels,
                      min_r2=min_r2, gain_tolerance=gain_tolerance)
    fits.attrs.update(reference_index=i_ref, reference_choice="given" if reference is not None else
                      "most valid pixels in the sample")
    return fits


def measure_comparability(cube: xr.DataArray, *, band, reference, by: str | None = None, n_blocks: int = N_BLOCKS,
                          block: int = 256, upsample: int = 20, min_valid: float = 0.5, min_blocks: int = 3,
                          sample: int = SAMPLE, seed: int = 0, threshold: float = 0.95,
                          min_pixels: int = MIN_INVARIANT, min_r2: float = MIN_R2,
                          gain_tolerance: float = GAIN_TOLERANCE, sigma: float = SIGMA,
                          min_peak_ratio: float = MIN_PEAK_RATIO, max_peak_sd: float = MAX_PEAK_SD,
                          max_spread: float = MAX_SPREAD, memory: int = BLOCK_MEMORY,
                          valid_range: tuple[float, float] | None = None) -> tuple[xr.Dataset, xr.Dataset]:
    """Registration and radiometry from one read of the blocks (all bands).

    As :func:`measure_registration` and :func:`measure_radiometry`, but the radiometric sample is a fixed
    random sample of the pixels of the registration blocks, taken by the same per-date task that measures
    the shift: the stack is read once, only where the blocks lie, and memory holds the reference's blocks,
    the dates in flight and the sample. Every date's shift is measured against ``reference``; with ``by``
    (e.g. ``"sensor"``) the radiometry is fitted within each group of dates, from the same sample: the
    reference's group against ``reference``, every other group against its date with most sampled pixels
    valid in every band (:func:`unmix.cube.radiometry.fit_sample`). Without ``reference``, the date with
    most valid pixel-bands in the blocks is the reference, chosen from the same read while the blocks of
    every date fit in ``memory`` bytes (:data:`BLOCK_MEMORY`; beyond, the blocks are read twice). Returns
    ``(shifts, fits)``; the reference and how it was chosen are in ``shifts.attrs`` (``reference``,
    ``reference_index``, ``reference_choice``).

    References
    ----------
    Guizar-Sicairos, M., Thurman, S. T. and Fienup, J. R. (2008). doi:10.1364/OL.33.000156
    Argyriou, V. and Vlachos, T. (2003). doi:10.1049/el:20030666
    Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013
    """
    idx = _band_indices(cube, band)
    windows = block_layout(cube, n_blocks, block)
    i_ref, reads, chosen = _reference_index(cube, reference, _block_reads(cube, windows, valid_range), windows, memory)
    settings = _registration_settings(upsample, min_valid, min_blocks, sigma, min_peak_ratio, max_peak_sd,
                                      max_spread)
    results = _measure_dates(reads, i_ref, bands=idx, picks=window_picks(windows, sample, seed), settings=settings)
    shifts = _shift_dataset(cube["time"].values, results, i_ref, block=block, n_windows=len(windows),
                            band_names=[str(cube["band"].values[k]) for k in idx], settings=settings, chosen=chosen)
    values = np.stack([smp for _, _, smp in results]).astype(np.float64).transpose(0, 2, 1)  # (time, pixel, band)
    fits = fit_sample(cube, values, i_ref, by=by, seed=seed, threshold=threshold, min_pixels=min_pixels,
                      min_r2=min_r2, gain_tolerance=gain_tolerance)
    fits.attrs.update(sampled_from="registration blocks", reference_index=i_ref, reference_choice=chosen)
    return shifts, fits
