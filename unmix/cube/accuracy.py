"""Class maps of a trends product as strata: choose a map, count its classes, draw sample points, and
read fractions at reference points. No paths are opened here (see :mod:`unmix.io.sample`)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from ..accuracy import stratified_sample
from ..errors import InputError, UnknownNameError
from .georef import georef_of, pixel_area_m2

__all__ = ["NO_DATA_CLASS", "class_maps", "select_class_map", "strata_table", "sample_points", "fractions_at_points"]

#: Flag meaning of pixels without a label; never a stratum (areas are estimated over the pixels with data).
NO_DATA_CLASS = "insufficient_data"


def class_maps(ds: xr.Dataset) -> list[str]:
    """Names of the categorical maps of a product: variables on (y, x) or (endmember, y, x) with CF flags."""
    return [name for name, v in ds.data_vars.items()
            if "flag_values" in v.attrs and "flag_meanings" in v.attrs and {"y", "x"} <= set(v.dims)
            and set(v.dims) <= {"endmember", "y", "x"}]


def select_class_map(ds: xr.Dataset, name: str, endmember: str | None = None) -> xr.DataArray:
    """The (y, x) class map ``name`` of a trends product (``trajectory`` needs ``endmember``).

    Raises
    ------
    UnknownNameError
        ``name`` is not a categorical map of the product, or ``endmember`` is not one of its endmembers
        (the message lists the known ones).
    """
    known = class_maps(ds)
    if name not in known:
        raise UnknownNameError(f"no class map {name!r} in the product; its class maps are: {', '.join(known) or 'none'} "
                               "(trajectory needs --endmember; rule maps are named as in the rules file)")
    da = ds[name]
    if "endmember" in da.dims:
        names = [str(v) for v in ds["endmember"].values]
        if endmember is None or endmember not in names:
            what = "needs an endmember" if endmember is None else f"has no endmember {endmember!r}"
            raise UnknownNameError(f"map {name!r} {what}; give one of: {', '.join(names)} (--endmember)")
        da = da.sel(endmember=endmember, drop=True)
    elif endmember is not None:
        raise InputError(f"map {name!r} is one map for all endmembers; leave out --endmember {endmember}")
    return da.transpose("y", "x")


def _classes(da: xr.DataArray) -> list[tuple[int, str]]:
    values = np.atleast_1d(da.attrs["flag_values"]).astype(np.int64)
    meanings = str(da.attrs["flag_meanings"]).split()
    if len(values) != len(meanings):
        raise InputError(f"map {da.name!r} has {len(values)} flag_values but {len(meanings)} flag_meanings; "
                         "write the product again with the command that made it")
    return sorted(zip(values.tolist(), meanings))


def strata_table(da: xr.DataArray) -> pd.DataFrame:
    """Pixels and mapped area of every class of a (y, x) class map, the no-data class left out.

    Returns
    -------
    pandas.DataFrame
        Columns ``map_class``, ``map_code``, ``mapped_pixels``, ``pixel_area_m2`` (NaN for a geographic
        grid: areas are then in pixels) and ``mapped_area_ha``, one row per class (also classes of no
        pixel). ``attrs["area_note"]`` says how the pixel area was found.
    """
    codes = np.asarray(da.values)
    classes = [(c, m) for c, m in _classes(da) if m != NO_DATA_CLASS]
    area_m2, note = pixel_area_m2(da)
    pixels = [int(np.count_nonzero(codes == c)) for c, _ in classes]
    table = pd.DataFrame({
        "map_class": [m for _, m in classes],
        "map_code": [c for c, _ in classes],
        "mapped_pixels": pixels,
        "pixel_area_m2": area_m2,
        "mapped_area_ha": np.asarray(pixels, dtype=float) * area_m2 / 1e4,
    })
    table.attrs["area_note"] = note
    return table


def sample_points(da: xr.DataArray, strata: pd.DataFrame, sizes, seed: int | None) -> pd.DataFrame:
    """Draw a stratified random sample of pixels of a class map; one row per point, in random order.

    Parameters
    ----------
    da : xarray.DataArray
        (y, x) class map.
    strata : pandas.DataFrame
        From :func:`strata_table`.
    sizes : (k,) sequence of int
        Sample size of each row of ``strata``.
    seed : int or None
        Seed of the draw (the same seed gives the same points, and the same order).

    Returns
    -------
    pandas.DataFrame
        ``point_id`` (1..n), ``map_class``, ``map_code``, ``row``, ``col`` (0-based pixel position) and
        ``x``, ``y`` (pixel centre in the map's CRS). The order is shuffled so that an interpreter does
        not work through one class after another.
    """
    codes = np.asarray(da.values)
    per_code = {int(c): int(n) for c, n in zip(strata["map_code"], sizes)}
    drawn = stratified_sample(codes, per_code, seed)
    name_of = dict(zip(strata["map_code"].astype(int), strata["map_class"]))
    flat = np.concatenate([drawn[c] for c in sorted(drawn)]) if drawn else np.zeros(0, np.int64)
    order = np.random.default_rng(None if seed is None else seed + 1).permutation(flat.size)
    flat = flat[order]
    rows, cols = np.unravel_index(flat, codes.shape)
    point_code = codes[rows, cols].astype(np.int64)
    return pd.DataFrame({
        "point_id": np.arange(1, flat.size + 1),
        "map_class": [name_of[int(c)] for c in point_code],
        "map_code": point_code,
        "row": rows.astype(np.int64),
        "col": cols.astype(np.int64),
        "x": np.asarray(da["x"].values, dtype=float)[cols],
        "y": np.asarray(da["y"].values, dtype=float)[rows],
    })


def fractions_at_points(fractions: xr.DataArray, x, y, dates=None, *, max_days: float = 16.0) -> np.ndarray:
    """Fractions of the pixel holding each point, at the date nearest to the point's date.

    Parameters
    ----------
    fractions : xarray.DataArray
        (time, endmember, y, x) fractions.
    x, y : (n,) array_like of float
        Point coordinates in the product's CRS.
    dates : (n,) array_like of datetime64, optional
        Date of each reference; without, the product must hold a single date.
    max_days : float
        Largest gap [days] between a reference date and the nearest product date.

    Returns
    -------
    (n, n_endmember) float64 ndarray

    Raises
    ------
    InputError
        A point outside the grid, a date further than ``max_days`` from every product date, or no dates
        for a product of several dates (the message names the point, counted from 1).
    """
    _, transform = georef_of(fractions)
    if transform is None:
        raise InputError("the fractions product has no georeferencing (no transform); cannot place points")
    a, b, c, d, e, f = transform
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    det = a * e - b * d
    col = np.floor(((x - c) * e - (y - f) * b) / det).astype(np.int64)
    row = np.floor(((y - f) * a - (x - c) * d) / det).astype(np.int64)
    outside = (row < 0) | (row >= fractions.sizes["y"]) | (col < 0) | (col >= fractions.sizes["x"])
    if outside.any():
        i = int(np.flatnonzero(outside)[0])
        raise InputError(f"reference point {i + 1} (x={x[i]}, y={y[i]}) lies outside the fractions grid; "
                         f"{int(outside.sum())} point(s) outside: check the coordinates and their CRS")
    times = np.asarray(fractions["time"].values).astype("datetime64[s]")
    if dates is None:
        if times.size != 1:
            raise InputError(f"the fractions product holds {times.size} dates; give each reference point a date "
                             "(a 'date' column) or choose one with --date")
        t_index = np.zeros(x.size, dtype=np.int64)
    else:
        when = np.asarray(dates).astype("datetime64[s]")
        gap = np.abs(when[:, None] - times[None, :]).astype(np.float64) / 86400.0
        t_index = np.argmin(gap, axis=1)
        far = gap[np.arange(x.size), t_index] > max_days
        if far.any():
            i = int(np.flatnonzero(far)[0])
            raise InputError(f"reference point {i + 1} ({str(when[i])[:10]}) is more than {max_days:g} days from "
                             f"every date of the fractions product; raise --max-days or check the dates")
    picked = fractions.transpose("time", "endmember", "y", "x").isel(
        time=xr.DataArray(t_index, dims="point"), y=xr.DataArray(row, dims="point"),
        x=xr.DataArray(col, dims="point"))
    return np.asarray(picked.transpose("point", "endmember").values, dtype=np.float64)
