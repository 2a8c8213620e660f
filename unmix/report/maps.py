"""Report maps of a fractions product: period composites per endmember, an RGB fraction composite,
and the data-quality maps (valid observations per pixel, unmixing RMSE).

Each function returns a :class:`matplotlib.figure.Figure` (no pyplot state, nothing saved). Every
map states its CRS, carries a scale bar (projected CRS) or longitude / latitude ticks, and draws no
data as a hatched grey with its own legend entry (:mod:`unmix.report.palettes`).
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence

import numpy as np
import xarray as xr
from matplotlib.colors import ListedColormap
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from ..errors import InputError
from ._mapping import crs_caption, decorate, draw_nodata, map_frame, nodata_handle, north_up
from .palettes import SEQUENTIAL_CMAP

__all__ = [
    "default_periods",
    "fraction_period_maps",
    "period_composite",
    "rgb_composite_figure",
    "rmse_map",
    "rmse_share",
    "valid_count_map",
]

#: A period: (label, first day, day after the last) as datetime64[D].
Period = tuple[str, np.datetime64, np.datetime64]


def default_periods(time: np.ndarray) -> list[Period]:
    """The first and the last calendar year of a record (one period if it spans a single year).

    Examples
    --------
    >>> [p[0] for p in default_periods(np.array(["2016-03-01", "2021-10-01"], "datetime64[ns]"))]
    ['2016', '2021']
    """
    years = np.asarray(time).astype("datetime64[Y]")
    first, last = years.min(), years.max()
    out = [(str(first), first.astype("datetime64[D]"), (first + 1).astype("datetime64[D]"))]
    if last != first:
        out.append((str(last), last.astype("datetime64[D]"), (last + 1).astype("datetime64[D]")))
    return out


def _as_period(p) -> Period:
    if isinstance(p, (int, np.integer)):
        year = np.datetime64(str(int(p)), "Y")
        return str(int(p)), year.astype("datetime64[D]"), (year + 1).astype("datetime64[D]")
    if len(p) == 3:
        return str(p[0]), np.datetime64(p[1], "D"), np.datetime64(p[2], "D")
    start, end = np.datetime64(p[0], "D"), np.datetime64(p[1], "D")
    return f"{start} to {end - 1}", start, end


def period_composite(fractions: xr.DataArray, start, end) -> xr.DataArray:
    """Per-pixel median of the valid dates in ``start <= date < end`` (a composite, not one cloudy date).

    Parameters
    ----------
    fractions : (time, ...) xarray.DataArray
        Fractions (NaN = no data), lazy or in memory.
    start, end : datetime64 or str
        First day of the period and the day after its last.

    Returns
    -------
    (...) xarray.DataArray
        NaN where a pixel has no valid date in the period; attribute ``n_dates`` = dates in the period.

    Examples
    --------
    >>> da = xr.DataArray([[0.1], [np.nan], [0.3]], dims=("time", "x"),
    ...                   coords={"time": np.array(["2020-01-01", "2020-06-01", "2020-09-01"], "datetime64[ns]")})
    >>> float(period_composite(da, "2020-01-01", "2021-01-01")[0])
    0.2
    """
    t = np.asarray(fractions["time"].values).astype("datetime64[D]")
    start, end = np.datetime64(start, "D"), np.datetime64(end, "D")
    picked = np.flatnonzero((t >= start) & (t < end))
    if not picked.size:
        raise InputError(f"no date of the fractions falls in the period {start} to {end - 1} "
                         f"(the record runs {t.min()} to {t.max()}); choose another period")
    sub = fractions.isel(time=picked)
    if sub.chunks is not None:
        sub = sub.chunk({"time": -1})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN pixels give NaN, as they should
        out = sub.median("time", skipna=True).compute()
    return out.assign_attrs(n_dates=int(picked.size), period=f"{start} to {end - 1}")


def _sequential(n_colours: int = 256, top: float = 1.0) -> ListedColormap:
    from matplotlib import colormaps

    base = colormaps[SEQUENTIAL_CMAP]
    return ListedColormap(base(np.linspace(0.0, top, n_colours))).with_extremes(bad=(0, 0, 0, 0))


def fraction_period_maps(fractions: xr.DataArray, periods: Sequence | None = None) -> Figure:
    """Maps of every endmember's period composite (rows: periods; default first and last year).

    Parameters
    ----------
    fractions : (time, endmember, y, x) xarray.DataArray
    periods : sequence, optional
        Years (``2016``), ``(start, end)`` pairs (end exclusive) or ``(label, start, end)``.

    Returns
    -------
    matplotlib.figure.Figure
    """
    chosen = [_as_period(p) for p in periods] if periods is not None else default_periods(fractions["time"].values)
    names = [str(n) for n in fractions["endmember"].values]
    frame = map_frame(fractions)
    fig = Figure(figsize=(2.6 * len(names) + 1.6, 2.5 * len(chosen) + 0.6), layout="constrained")
    axes = fig.subplots(len(chosen), len(names), squeeze=False)
    cmap = _sequential()
    image, any_nodata = None, False
    for r, (label, start, end) in enumerate(chosen):
        comp = period_composite(fractions, start, end)
        for c, name in enumerate(names):
            values = north_up(comp.sel(endmember=name))
            ax = axes[r, c]
            image = ax.imshow(np.ma.masked_invalid(values), cmap=cmap, vmin=0.0, vmax=1.0, extent=frame.extent,
                              interpolation="nearest")
            missing = np.isnan(values)
            draw_nodata(ax, missing, frame)
            any_nodata |= bool(missing.any())
            decorate(ax, frame, f"{name}\n{label}: median of {comp.attrs['n_dates']} dates")
    fig.colorbar(image, ax=axes, shrink=0.8, label="fraction [0-1]")
    fig.legend(handles=[nodata_handle("no data (no valid date in the period)")], loc="outside right center", fontsize=7,
               frameon=False)
    crs_caption(fig, frame)
    return fig


def rgb_composite_figure(fractions: xr.DataArray, endmembers: Sequence[str], period=None) -> Figure:
    """Three endmembers' period composites as red, green and blue (fraction 0 -> dark, 1 -> full).

    Red-green mixtures are not colour-blind safe; the legend names each channel, and the single-
    endmember maps of :func:`fraction_period_maps` carry the same information on a safe scale.

    Parameters
    ----------
    fractions : (time, endmember, y, x) xarray.DataArray
    endmembers : sequence of 3 str
        Endmembers shown as red, green, blue.
    period : optional
        As one item of ``periods`` in :func:`fraction_period_maps`; default the last year.
    """
    if len(endmembers) != 3:
        raise InputError(f"an RGB composite needs three endmembers (red, green, blue), got {list(endmembers)}")
    known = [str(n) for n in fractions["endmember"].values]
    missing = [e for e in endmembers if e not in known]
    if missing:
        raise InputError(f"endmember(s) {', '.join(missing)} not in the fractions; available: {', '.join(known)}")
    label, start, end = _as_period(period) if period is not None else default_periods(fractions["time"].values)[-1]
    comp = period_composite(fractions.sel(endmember=list(endmembers)), start, end)
    rgb = np.moveaxis(north_up(comp), 0, -1)
    nodata = np.isnan(rgb).any(axis=-1)
    frame = map_frame(fractions)
    fig = Figure(figsize=(5.2, 4.4), layout="constrained")
    ax = fig.subplots()
    ax.imshow(np.where(nodata[..., None], 0.0, np.clip(rgb, 0.0, 1.0)), extent=frame.extent,
              interpolation="nearest")
    draw_nodata(ax, nodata, frame)
    decorate(ax, frame, f"{label}: median of {comp.attrs['n_dates']} dates")
    handles = [Patch(facecolor=colour, label=f"{channel}: {name}") for channel, colour, name in
               zip(("red", "green", "blue"), ("#FF0000", "#00FF00", "#0000FF"), endmembers)]
    fig.legend(handles=[*handles, nodata_handle()], loc="outside right center", fontsize=7, frameon=False)
    crs_caption(fig, frame, "channel brightness = fraction 0-1")
    return fig


def valid_count_map(valid_count: xr.DataArray, n_dates: int | None = None) -> Figure:
    """Valid observations (dates with a fraction) per pixel; pixels with none are no data.

    Parameters
    ----------
    valid_count : (y, x) xarray.DataArray
        ``valid_count`` of a fractions product.
    n_dates : int, optional
        Dates in the record (top of the colour scale); default the largest count.
    """
    counts = north_up(valid_count)
    top = float(n_dates if n_dates is not None else max(1.0, np.nanmax(counts)))
    frame = map_frame(valid_count)
    fig = Figure(figsize=(5.0, 4.2), layout="constrained")
    ax = fig.subplots()
    image = ax.imshow(np.ma.masked_where(~(counts > 0), counts), cmap=_sequential(top=0.9), vmin=0, vmax=top,
                      extent=frame.extent, interpolation="nearest")
    draw_nodata(ax, ~(counts > 0), frame)
    decorate(ax, frame, f"valid observations per pixel (of {int(top)} dates)")
    fig.colorbar(image, ax=ax, shrink=0.8, label="valid dates [count]")
    fig.legend(handles=[nodata_handle("no data (no valid date)")], loc="outside right center", fontsize=7, frameon=False)
    crs_caption(fig, frame)
    return fig


def _median_rmse(rmse: xr.DataArray) -> xr.DataArray:
    if "time" not in rmse.dims:
        return rmse
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # pixels without data stay NaN
        return rmse.median("time", skipna=True).compute()


def rmse_share(rmse: xr.DataArray, limit: float) -> tuple[np.ndarray, float]:
    """Per-pixel median RMSE over the dates and the share of pixels (with data) whose median exceeds ``limit``.

    Returns
    -------
    median : (y, x) ndarray, north up, full resolution
    share : float
        0..1; NaN when no pixel has data.
    """
    median = north_up(_median_rmse(rmse), limit=None)
    return median, _share_above(median, limit)


def _share_above(values: np.ndarray, limit: float) -> float:
    have = np.isfinite(values)
    return float((values[have] > limit).mean()) if have.any() else float("nan")


def rmse_map(rmse: xr.DataArray, limit: float = 0.025) -> Figure:
    """The unmixing RMSE (per-pixel median over dates) with the share of pixels above ``limit``.

    Parameters
    ----------
    rmse : (time, y, x) or (y, x) xarray.DataArray
        ``rmse`` of a fractions product [reflectance].
    limit : float
        RMSE above which the endmembers do not describe a pixel well [reflectance].
    """
    per_pixel = _median_rmse(rmse)
    share = _share_above(north_up(per_pixel, limit=None), limit)
    median = north_up(per_pixel)
    frame = map_frame(rmse)
    top = max(2 * limit, float(np.nanpercentile(median, 99)) if np.isfinite(median).any() else 2 * limit)
    fig = Figure(figsize=(5.0, 4.2), layout="constrained")
    ax = fig.subplots()
    image = ax.imshow(np.ma.masked_invalid(median), cmap=_sequential(top=0.9), vmin=0.0, vmax=top,
                      extent=frame.extent, interpolation="nearest")
    draw_nodata(ax, np.isnan(median), frame)
    decorate(ax, frame, f"median unmixing RMSE; {100 * share:.1f} % of pixels above {limit:g}")
    bar = fig.colorbar(image, ax=ax, shrink=0.8, label="RMSE [reflectance]")
    bar.ax.axhline(limit, color="#000000", linewidth=1.5, linestyle="--")
    fig.legend(handles=[nodata_handle()], loc="outside right center", fontsize=7, frameon=False)
    crs_caption(fig, frame, f"dashed line on the scale = limit {limit:g}")
    return fig
