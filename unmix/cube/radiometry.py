"""Radiometric comparability of the dates of a lazy cube, from a fixed sample of pixels.

Draws the sample (over the whole scene, or from the registration blocks that
:func:`unmix.cube.comparability.measure_comparability` reads anyway) and fits each date's gain and offset
per band against a reference date with :func:`unmix.comparability.fit_date`. A record of several sensors
is fitted within each sensor (or any other group of dates): between sensors the bands differ by design,
so a gain between a TM and an OLI date would measure the sensors, not a calibration fault. No paths, no
printing.

References
----------
Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013
"""

from __future__ import annotations

import functools

import dask
import dask.array as da
import numpy as np
import xarray as xr

from unmix.comparability import GAIN_TOLERANCE, MIN_R2, fit_date
from unmix.comparability._blas import one_blas_thread  # noqa: F401 - the measures' BLAS guard
from unmix.errors import UnknownNameError

#: Pixels sampled for the radiometric fit. The fit itself needs far fewer (IR-MAD's 12 x 12 covariance
#: for six bands, whose entries n pixels give to a relative standard error near sqrt(2 / n); Anderson 2003,
#: from memory), but only about 0.5 % of a related pair of dates pass the 0.95 no-change level (measured on
#: benchmarks/bench_comparability.py): 20 000 keep about 100 invariant pixels, 10 000 only about 50, the
#: least the default fit asked for.
SAMPLE = 20000
#: Fewest invariant pixels a date's fit accepts: each band's orthogonal regression has two parameters, and
#: 25 pixels keep a small scene (100 x 100 px) measurable; the gain's standard error in the ledger says
#: how well it is known (a choice of this package).
MIN_INVARIANT = 25

__all__ = ["SAMPLE", "MIN_INVARIANT", "sample_scene", "window_picks", "date_groups", "fit_sample"]


def date_label(value) -> str:
    """A date as YYYY-MM-DD (any other time label as text)."""
    return str(np.datetime_as_string(np.datetime64(value, "D"))) if np.issubdtype(
        np.asarray(value).dtype, np.datetime64) else str(value)


def _pick(block: np.ndarray, *, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    return block[:, :, rows, cols]


def sample_scene(cube: xr.DataArray, sample: int, seed: int) -> np.ndarray:
    """A fixed random sample of pixels over the whole scene, (time, pixel, band); each read task keeps
    only its sampled pixels, so memory is bounded by the chunks in flight."""
    data = cube.transpose("time", "band", "y", "x").data
    data = data if isinstance(data, da.Array) else da.from_array(data, chunks=(1, -1, -1, -1))
    ny, nx = data.shape[2:]
    flat = np.sort(np.random.default_rng(seed).choice(ny * nx, size=min(sample, ny * nx), replace=False))
    rows, cols = flat // nx, flat % nx
    ye, xe = np.concatenate([[0], np.cumsum(data.chunks[2])]), np.concatenate([[0], np.cumsum(data.chunks[3])])
    parts, order = [], []
    for y0, y1 in zip(ye[:-1], ye[1:]):
        for x0, x1 in zip(xe[:-1], xe[1:]):
            sel = np.flatnonzero((rows >= y0) & (rows < y1) & (cols >= x0) & (cols < x1))
            if sel.size == 0:
                continue
            func = functools.partial(_pick, rows=rows[sel] - y0, cols=cols[sel] - x0)
            sub = data[:, :, y0:y1, x0:x1]
            parts.append(sub.map_blocks(func, drop_axis=3, chunks=sub.chunks[:2] + ((sel.size,),), dtype=data.dtype))
            order.append(sel)
    values = np.empty(data.shape[:2] + (rows.size,), dtype=np.float64)
    values[:, :, np.concatenate(order)] = da.concatenate(parts, axis=2).compute()
    return values.transpose(0, 2, 1)


def window_picks(windows, sample: int, seed: int) -> list[np.ndarray]:
    """A fixed random sample of ``sample`` pixels of the windows: flat pixel indices per window."""
    sizes = [(wy.stop - wy.start) * (wx.stop - wx.start) for wy, wx in windows]
    total = int(sum(sizes))
    keep = np.sort(np.random.default_rng(seed).choice(total, size=min(sample, total), replace=False))
    starts = np.concatenate([[0], np.cumsum(sizes)])
    return [keep[(keep >= a) & (keep < b)] - a for a, b in zip(starts[:-1], starts[1:])]


def date_groups(cube: xr.DataArray, by: str | None) -> np.ndarray:
    """The group label of each date: the values of the time coordinate ``by`` (one group when None).

    Raises
    ------
    UnknownNameError
        ``by`` is not a coordinate of the cube on ``time``.
    """
    if by is None:
        return np.zeros(cube.sizes["time"], dtype=np.int64)
    if by not in cube.coords or cube[by].dims != ("time",):
        on_time = [str(k) for k, c in cube.coords.items() if c.dims == ("time",) and k != "time"]
        raise UnknownNameError(f"coordinate {by!r} to group the dates by is not on the cube's time axis; its time "
                               f"coordinates are {', '.join(on_time) or '(none)'}")
    return np.asarray(cube[by].values).astype(str)


def _references(values: np.ndarray, i_ref: int, groups: np.ndarray) -> np.ndarray:
    """The date each date is fitted against: ``i_ref`` in its own group, in every other group the group's
    date with most sampled pixels valid in every band (the first of equals); -1 for a date alone in its
    group."""
    valid = np.isfinite(values).all(axis=2).sum(axis=1)
    out = np.full(groups.size, -1, dtype=np.int64)
    for label in dict.fromkeys(groups.tolist()):
        where = np.flatnonzero(groups == label)
        if where.size < 2:
            continue
        out[where] = i_ref if i_ref in where else where[int(np.argmax(valid[where]))]
    return out


def fit_sample(cube: xr.DataArray, values: np.ndarray, i_ref: int, *, by: str | None = None, seed: int = 0,
               threshold: float = 0.95, min_pixels: int = MIN_INVARIANT, min_r2: float = MIN_R2,
               gain_tolerance: float = GAIN_TOLERANCE) -> xr.Dataset:
    """Gain and offset per date and band from sampled pixels, each group of dates against its own reference.

    Parameters
    ----------
    cube : (time, band, y, x) DataArray
        The cube the sample was drawn from (its dates, bands and the ``by`` coordinate are used).
    values : (time, pixel, band) ndarray
        The same pixels on every date (NaN = no data).
    i_ref : int
        Position of the reference date. Its group is fitted against it; every other group (of the time
        coordinate ``by``) against the group's date with most sampled pixels valid in every band. A date
        alone in its group is not fitted (NaN, flagged).
    by : str, optional
        Time coordinate whose values group the dates (e.g. ``"sensor"``); None: one group.
    seed, threshold, min_pixels, min_r2, gain_tolerance
        Recorded seed of the sample; the fit's settings (:func:`unmix.comparability.fit_date`).

    Returns
    -------
    Dataset
        On (time, band): ``gain``, ``offset``, ``gain_se``, ``offset_se``, ``r2``; on time: ``n``
        (invariant pixels), ``flag`` ('' when fine, else the reason) and ``reference`` (the date it was
        fitted against, '' when not fitted). Each group's reference has gain 1 and offset 0.

    References
    ----------
    Canty, M. J. and Nielsen, A. A. (2008). doi:10.1016/j.rse.2007.07.013
    """
    n_t, n_b = cube.sizes["time"], cube.sizes["band"]
    times = cube["time"].values
    names = [str(b) for b in cube["band"].values]
    groups = date_groups(cube, by)
    against = _references(values, i_ref, groups)
    fields = {k: np.full((n_t, n_b), np.nan) for k in ("gain", "offset", "gain_se", "offset_se", "r2")}
    n = np.zeros(n_t, dtype=np.int64)
    flag = np.full(n_t, "", dtype=object)
    refs = sorted(set(against[against >= 0].tolist()))
    for r in refs:
        fields["gain"][r], fields["offset"][r] = 1.0, 0.0
        fields["gain_se"][r] = fields["offset_se"][r] = 0.0
        fields["r2"][r] = 1.0
        n[r] = int(np.isfinite(values[r]).all(axis=1).sum())
    alone = np.flatnonzero(against < 0)
    flag[alone] = f"not measured: the only date of its {by or 'group'}"
    others = [t for t in range(n_t) if against[t] >= 0 and t not in refs]
    fit_one = functools.partial(fit_date, threshold=threshold, min_pixels=min_pixels, min_r2=min_r2,
                                gain_tolerance=gain_tolerance, band_names=names)
    with one_blas_thread():
        fitted = dask.compute(*[dask.delayed(fit_one)(values[t], values[against[t]]) for t in others])
    for t, fit in zip(others, fitted):
        for k in fields:
            fields[k][t] = getattr(fit, k)
        n[t], flag[t] = fit.n, fit.flag
    dims = ("time", "band")
    data = {k: (dims, v) for k, v in fields.items()}
    data["n"] = ("time", n, {"long_name": "pseudo-invariant pixels fitted"})
    data["flag"] = ("time", flag.astype(str), {"long_name": "why the fit is doubtful ('' if fine)"})
    data["reference"] = ("time", np.array([date_label(times[r]) if r >= 0 else "" for r in against], dtype=str),
                         {"long_name": "date the date was fitted against ('' if not fitted)"})
    attrs = {"method": "IR-MAD invariant pixels + orthogonal regression (Canty & Nielsen 2008)",
             "reference": date_label(times[i_ref]), "sample": int(values.shape[1]), "seed": seed,
             "threshold": threshold, "min_r2": min_r2, "gain_tolerance": gain_tolerance}
    if by is not None:
        attrs["grouped_by"] = by
    return xr.Dataset(data, coords={"time": times, "band": cube["band"].values}, attrs=attrs)
