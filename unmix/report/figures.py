"""Report figures (matplotlib, non-interactive): fraction maps, trajectory maps, fraction series.

Each function returns a :class:`matplotlib.figure.Figure` built without pyplot's global state, so the
figures can be made in worker threads and saved by the IO layer.
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from matplotlib.figure import Figure

from ..dates import decimal_years
from .palettes import TRAJECTORY_PALETTE
from .trend_maps import trajectory_maps

__all__ = ["TRAJECTORY_COLOURS", "fraction_maps_figure", "trajectory_maps_figure", "series_figure"]

#: Colours of the trajectory labels (the colour-blind-safe palette of :mod:`unmix.report.palettes`).
TRAJECTORY_COLOURS = dict(TRAJECTORY_PALETTE)


def _extent(da: xr.DataArray) -> list[float]:
    x = np.asarray(da["x"].values, dtype=float)
    y = np.asarray(da["y"].values, dtype=float)
    dx = abs(x[1] - x[0]) if x.size > 1 else 1.0
    dy = abs(y[1] - y[0]) if y.size > 1 else dx
    return [x.min() - dx / 2, x.max() + dx / 2, y.min() - dy / 2, y.max() + dy / 2]


def fraction_maps_figure(fractions: xr.DataArray, *, times: tuple[int, ...] = (0, -1)) -> Figure:
    """Maps of every endmember's fraction at chosen dates (rows) on one 0..1 colour scale.

    Parameters
    ----------
    fractions : xarray.DataArray
        (time, endmember, y, x) fractions.
    times : tuple of int
        Positions along ``time`` to show, one row each.
    """
    names = [str(n) for n in fractions["endmember"].values]
    fig = Figure(figsize=(2.6 * len(names) + 0.8, 2.5 * len(times) + 0.4), layout="constrained")
    axes = fig.subplots(len(times), len(names), squeeze=False)
    extent = _extent(fractions)
    image = None
    for r, ti in enumerate(times):
        date = np.datetime_as_string(fractions["time"].values[ti], unit="D")
        for c, name in enumerate(names):
            ax = axes[r, c]
            values = np.asarray(fractions.isel(time=ti).sel(endmember=name).values, dtype=float)
            image = ax.imshow(values, vmin=0.0, vmax=1.0, cmap="viridis", extent=extent,
                              interpolation="nearest")
            ax.set_title(f"{name}\n{date}", fontsize=8)
            ax.set_xticks([])
            ax.set_yticks([])
    if image is not None:
        fig.colorbar(image, ax=axes, shrink=0.8, label="fraction")
    return fig


def trajectory_maps_figure(trajectory: xr.DataArray) -> Figure:
    """One categorical map of trajectory labels per endmember, with a legend.

    Kept for existing callers; see :func:`unmix.report.trend_maps.trajectory_maps`.

    Parameters
    ----------
    trajectory : xarray.DataArray
        (endmember, y, x) integer codes with CF ``flag_values`` and ``flag_meanings`` attributes.
    """
    return trajectory_maps(trajectory)


def series_figure(
    fractions: xr.DataArray,
    points: dict[str, tuple[int, int]],
    *,
    endmember: str,
    trends: xr.Dataset | None = None,
) -> Figure:
    """Fraction time series of one endmember at named pixels, with the Sen slope line when given.

    Parameters
    ----------
    fractions : xarray.DataArray
        (time, endmember, y, x) fractions.
    points : dict
        Label -> (row, column) pixel position.
    endmember : str
        Endmember to plot.
    trends : xarray.Dataset, optional
        Trend product; its ``slope`` and ``intercept`` (per year, decimal-year time) draw the fitted line.
    """
    fig = Figure(figsize=(7.0, 3.2), layout="constrained")
    ax = fig.subplots()
    time = fractions["time"].values
    years = decimal_years(time)
    for label, (row, col) in points.items():
        series = np.asarray(fractions.sel(endmember=endmember).isel(y=row, x=col).values, dtype=float)
        (line,) = ax.plot(time, series, marker="o", markersize=3, linewidth=0.8, label=label)
        if trends is not None and "slope" in trends:
            sel = trends.sel(endmember=endmember).isel(y=row, x=col)
            slope, intercept = float(sel["slope"]), float(sel["intercept"])
            if np.isfinite(slope) and np.isfinite(intercept):
                ax.plot(time, intercept + slope * years, color=line.get_color(), linestyle="--",
                        linewidth=1.2)
    ax.set_ylabel(f"{endmember} fraction")
    ax.set_ylim(-0.02, 1.02)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8, ncols=min(4, len(points)))
    return fig

