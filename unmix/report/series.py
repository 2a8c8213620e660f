"""Report time series: fractions at chosen points and zone means, with the Sen line and its interval.

The Sen line is ``intercept + slope * decimal year`` (the convention of :func:`unmix.trend.sen_slope`
and of ``trends.nc``: the line passes through the median time and the median fraction). Its interval
is the band between the lines of the slope's confidence bounds through that same centre point.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import xarray as xr
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from ..dates import decimal_years
from ..errors import InputError
from ._mapping import map_frame
from .palettes import SERIES_STYLES

__all__ = ["point_series_figure", "sen_band", "zone_series_figure"]


def sen_band(years: np.ndarray, valid_years: np.ndarray, slope: float, intercept: float, low: float,
             high: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The Sen line and its interval band at ``years``.

    Parameters
    ----------
    years : (n,) ndarray
        Where to evaluate [decimal year].
    valid_years : (m,) ndarray
        Decimal years of the valid observations (their median is the lines' pivot).
    slope, intercept, low, high : float
        Sen slope [1/yr], intercept, and the slope's confidence bounds [1/yr].

    Returns
    -------
    line, lower, upper : (n,) ndarrays

    Examples
    --------
    >>> line, lo, hi = sen_band(np.array([2000.0, 2002.0]), np.array([2000.0, 2001.0, 2002.0]), 0.1, -199.0, 0.0, 0.2)
    >>> line.round(6).tolist(), lo.round(6).tolist(), hi.round(6).tolist()
    ([1.0, 1.2], [0.9, 1.1], [1.1, 1.3])
    """
    line = intercept + slope * years
    centre = float(np.median(valid_years))
    level = intercept + slope * centre
    a = level + low * (years - centre)
    b = level + high * (years - centre)
    return line, np.minimum(a, b), np.maximum(a, b)


def _draw(ax: Axes, time: np.ndarray, series: np.ndarray, style: dict, label: str,
          sen: tuple[float, float, float, float] | None) -> None:
    ax.plot(time, series, color=style["color"], marker=style["marker"], markersize=3.5, linewidth=0.7,
            linestyle="none" if sen is not None else style["linestyle"], label=label)
    if sen is None or not np.isfinite(sen[:2]).all():
        return
    years = decimal_years(time)
    valid = np.isfinite(series)
    line, lower, upper = sen_band(years, years[valid], *sen)
    ax.plot(time, line, color=style["color"], linestyle=style["linestyle"], linewidth=1.4,
            label=f"{label}: Sen {sen[0]:+.4f}/yr")
    if np.isfinite(sen[2:]).all():
        ax.fill_between(time, lower, upper, color=style["color"], alpha=0.18, linewidth=0)


def _finish(ax: Axes, fig: Figure, endmember: str, note: str) -> None:
    ax.set_ylabel(f"{endmember} fraction [0-1]")
    ax.set_ylim(-0.02, 1.02)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, ncols=2, loc="best")
    ax.set_title(note, fontsize=8)


def point_series_figure(fractions: xr.DataArray, points: Mapping[str, tuple[float, float]], *, endmember: str,
                        trends: xr.Dataset | None = None) -> Figure:
    """Fraction series of one endmember at points given in the raster's CRS, with each pixel's Sen line.

    Parameters
    ----------
    fractions : (time, endmember, y, x) xarray.DataArray
    points : mapping
        Label -> (x, y) in the raster CRS [map units]; the pixel containing the point is used.
    endmember : str
    trends : xarray.Dataset, optional
        Trend product: ``slope``, ``intercept``, ``slope_low``, ``slope_high`` draw the line and band.

    Returns
    -------
    matplotlib.figure.Figure
    """
    frame = map_frame(fractions)
    left, right, bottom, top = frame.extent
    fig = Figure(figsize=(7.2, 3.4), layout="constrained")
    ax = fig.subplots()
    time = fractions["time"].values
    for k, (label, (x, y)) in enumerate(points.items()):
        if not (left <= x <= right and bottom <= y <= top):
            raise InputError(f"point {label!r} at x={x}, y={y} lies outside the raster "
                             f"(x {left:g}..{right:g}, y {bottom:g}..{top:g} in {frame.crs_name}); "
                             "give coordinates in the raster's CRS")
        pixel = fractions.sel(endmember=endmember).sel(x=x, y=y, method="nearest")
        sen = None
        if trends is not None:
            at = trends.sel(endmember=endmember).sel(x=x, y=y, method="nearest")
            sen = tuple(float(at[v]) if v in at else float("nan")
                        for v in ("slope", "intercept", "slope_low", "slope_high"))
        _draw(ax, time, np.asarray(pixel.values, dtype=float), SERIES_STYLES[k % len(SERIES_STYLES)], label, sen)
    _finish(ax, fig, endmember, f"points (x, y in {frame.crs_name}); band = 95 % interval of the Sen slope")
    return fig


def zone_series_figure(fractions: xr.DataArray, zones: Mapping[str, np.ndarray | xr.DataArray], *,
                       endmember: str, sen: bool = True) -> Figure:
    """Mean fraction of one endmember over zones per date, with the Sen line of each zone-mean series.

    Parameters
    ----------
    fractions : (time, endmember, y, x) xarray.DataArray
    zones : mapping
        Label -> (y, x) boolean mask on the fractions' grid.
    endmember : str
    sen : bool
        Fit :func:`unmix.trend.sen_slope` (95 % interval) to each zone-mean series and draw it.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from ..trend import sen_slope

    fig = Figure(figsize=(7.2, 3.4), layout="constrained")
    ax = fig.subplots()
    time = fractions["time"].values
    years = decimal_years(time)
    values = fractions.sel(endmember=endmember)
    shape = (values.sizes["y"], values.sizes["x"])
    for k, (label, zone) in enumerate(zones.items()):
        mask = np.asarray(zone.values if isinstance(zone, xr.DataArray) else zone, dtype=bool)
        if mask.shape != shape or not mask.any():
            raise InputError(f"zone {label!r} must be a (y, x) = {shape} mask with at least one pixel, "
                             f"got shape {mask.shape} with {int(mask.sum())} pixels")
        zone_da = xr.DataArray(mask, dims=("y", "x"))
        means = np.asarray(values.where(zone_da).mean(("y", "x"), skipna=True).values, dtype=float)
        fit = None
        good = np.isfinite(means)
        if sen and good.sum() >= 3:
            r = sen_slope(means[good], years[good])
            fit = (float(r.slope), float(r.intercept), float(r.low), float(r.high))
        _draw(ax, time, means, SERIES_STYLES[k % len(SERIES_STYLES)], f"{label} ({int(mask.sum())} px)", fit)
    _finish(ax, fig, endmember, "zone means per date; band = 95 % interval of the Sen slope")
    return fig
