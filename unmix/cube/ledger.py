"""The date ledger: one table of every date of a record, what was measured about it and whether it was used.

A ledger is an ``xarray.Dataset`` on ``time`` (every date offered, used or not) with the variables of
:data:`LEDGER_VARIABLES`; any of them may be missing. Per-band radiometric fits sit on
(time, band). :mod:`unmix.io.ledger` writes it as CSV and carries it into NetCDF products.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import xarray as xr

from ..comparability.phenology import day_of_year
from ..errors import InputError, ShapeError

__all__ = ["LEDGER_VARIABLES", "LEDGER_BAND_VARIABLES", "build_ledger", "mark_unused"]

#: Variables on time: name -> CF attributes.
LEDGER_VARIABLES: dict[str, dict[str, str]] = {
    "doy": {"long_name": "day of year of the acquisition", "units": "1"},
    "sensor": {"long_name": "sensor that observed the date"},
    "product": {"long_name": "delivered product or file of the date"},
    "valid_share": {"long_name": "share of the pixels with valid data", "units": "1"},
    "shift_y": {"long_name": "geometric shift of the date along y", "units": "pixel"},
    "shift_x": {"long_name": "geometric shift of the date along x", "units": "pixel"},
    "shift_sd": {"long_name": "standard uncertainty of the geometric shift", "units": "pixel"},
    "used": {"long_name": "date used in the products"},
    "reason": {"long_name": "why the date was not used, or what was flagged on a used date (empty: used, nothing flagged)"},
}
#: Variables on (time, band): name -> CF attributes of the per-band radiometric fit (reference = gain * date + offset).
LEDGER_BAND_VARIABLES: dict[str, dict[str, str]] = {
    "gain": {"long_name": "radiometric gain of the date against the reference", "units": "1"},
    "offset": {"long_name": "radiometric offset of the date against the reference", "units": "1"},
    "r2": {"long_name": "coefficient of determination of the radiometric fit", "units": "1"},
}
_TEXT = ("sensor", "product", "reason")
_FLOAT = ("valid_share", "shift_y", "shift_x", "shift_sd")


def build_ledger(time, *, sensor=None, product=None, valid_share=None, shift_y=None, shift_x=None, shift_sd=None,
                 bands: Sequence[str] | None = None, gain=None, offset=None, r2=None, used=None,
                 reason=None) -> xr.Dataset:
    """Assemble a ledger from whatever parts are known.

    Parameters
    ----------
    time : (n_time,) datetime64 array_like
        Every date of the record (used or not).
    sensor, product, reason : (n_time,) str array_like, optional
    valid_share : (n_time,) float, optional
        Share of valid pixels [0-1].
    shift_y, shift_x, shift_sd : (n_time,) float, optional
        Geometric shift and its uncertainty [pixel].
    bands : sequence of str, optional
        Band names of ``gain`` / ``offset`` / ``r2`` (required with them).
    gain, offset, r2 : (n_time, n_bands) float, optional
        Per-band radiometric fit of each date.
    used : (n_time,) bool, optional
        Default: dates without a reason are used (all, without ``reason``).

    Returns
    -------
    xarray.Dataset
        On ``time`` (and ``band``): ``doy`` always, ``used`` and ``reason`` always, the other
        variables when given; floats as float32 (NaN = not known), text as str.

    Examples
    --------
    >>> led = build_ledger(np.array(["2020-01-05", "2020-03-01"], "datetime64[ns]"),
    ...                    reason=["", "outside day-of-year window 335-60"])
    >>> led.doy.values.tolist(), led.used.values.tolist()
    ([5, 61], [True, False])
    """
    t = np.asarray(time)
    if t.dtype.kind in "US":
        t = t.astype("datetime64[ns]")
    if t.ndim != 1 or not np.issubdtype(t.dtype, np.datetime64):
        raise InputError(f"a ledger needs one real date per row (1-d datetime64), got {t.dtype} of shape {t.shape}")
    t = t.astype("datetime64[ns]")
    n = t.size
    ds = xr.Dataset(coords={"time": ("time", t)})
    ds["doy"] = ("time", day_of_year(t).astype(np.int16))

    def one(name, value, kind):
        arr = np.asarray(value)
        if arr.shape != (n,):
            raise ShapeError(f"ledger {name} needs one value per date ({n}), got shape {arr.shape}")
        if kind == "text":
            arr = np.array(["" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v) for v in arr],
                           dtype=object).astype(str)
        else:
            arr = arr.astype(np.float32)
        ds[name] = ("time", arr)

    for name, value in (("sensor", sensor), ("product", product)):
        if value is not None:
            one(name, value, "text")
    for name, value in zip(_FLOAT, (valid_share, shift_y, shift_x, shift_sd)):
        if value is not None:
            one(name, value, "float")
    fits = {"gain": gain, "offset": offset, "r2": r2}
    if any(v is not None for v in fits.values()):
        if bands is None:
            raise InputError("ledger gain / offset / r2 need the band names (bands=...)")
        bands = [str(b) for b in bands]
        ds = ds.assign_coords(band=("band", np.array(bands, dtype=str)))
        for name, value in fits.items():
            if value is None:
                continue
            arr = np.asarray(value, np.float32)
            if arr.shape != (n, len(bands)):
                raise ShapeError(f"ledger {name} needs (dates, bands) = ({n}, {len(bands)}), got shape {arr.shape}")
            ds[name] = (("time", "band"), arr)
    one("reason", [""] * n if reason is None else reason, "text")
    if used is None:
        used_arr = ds["reason"].values == ""
    else:
        used_arr = np.asarray(used)
        if used_arr.shape != (n,) or used_arr.dtype.kind not in "bi":
            raise ShapeError(f"ledger used needs one true/false per date ({n}), got {used_arr.dtype} {used_arr.shape}")
        used_arr = used_arr.astype(bool)
    ds["used"] = ("time", used_arr)
    for name, attrs in {**LEDGER_VARIABLES, **LEDGER_BAND_VARIABLES}.items():
        if name in ds:
            ds[name].attrs = dict(attrs)
    ds["time"].attrs = {"long_name": "acquisition date"}
    order = [v for v in [*LEDGER_VARIABLES, *LEDGER_BAND_VARIABLES] if v in ds.data_vars]
    out = ds[order]
    out.attrs = {"title": "date ledger: every date of the record, its checks and whether it was used"}
    return out


def mark_unused(ledger: xr.Dataset, reasons) -> xr.Dataset:
    """A copy of ``ledger`` with more reasons: each non-empty reason marks its date unused.

    ``reasons`` is one string per date of the ledger (an ``xarray.DataArray`` on ``time`` is aligned
    by date; dates it does not cover keep their state). Reasons already there are kept, joined with
    "; ".

    Examples
    --------
    >>> led = build_ledger(np.array(["2020-01-05", "2020-03-01"], "datetime64[ns]"))
    >>> mark_unused(led, ["", "valid share 0.02 below 0.1"]).reason.values.tolist()
    ['', 'valid share 0.02 below 0.1']
    """
    if isinstance(reasons, xr.DataArray):
        reasons = reasons.astype(str).reindex(time=ledger["time"], fill_value="").values
    new = np.asarray(reasons, dtype=object)
    if new.shape != (ledger.sizes["time"],):
        raise ShapeError(f"mark_unused needs one reason per ledger date ({ledger.sizes['time']}), got {new.shape}")
    old = ledger["reason"].values.astype(str)
    joined = np.array(["; ".join(r for r in (str(a), str(b)) if r) for a, b in zip(old, new)], dtype=object).astype(str)
    out = ledger.copy()
    out["reason"] = ("time", joined, ledger["reason"].attrs)
    out["used"] = ("time", ledger["used"].values & (new.astype(str) == ""), ledger["used"].attrs)
    return out
