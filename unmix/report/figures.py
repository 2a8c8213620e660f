"""Report figures (matplotlib, non-interactive): fraction maps, trajectory maps, fraction series.

Each function returns a :class:`matplotlib.figure.Figure` built without pyplot's global state, so the
figures can be made in worker threads and saved by the IO layer.
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from matplotlib.colors import BoundaryNorm, ListedColormap
from matplotlib.figure import Figure

from ..dates import decimal_years

__all__ = ["TRAJECTORY_COLOURS", "fraction_maps_figure", "trajectory_maps_figure", "series_figure"]

#: Colours of the trajectory labels in this project's maps (our own choice: warm hues for losses,
#: cool hues for gains, darker for abrupt, a pale neutral for stable and white for too few dates).
TRAJECTORY_COLOURS = {
    "stable": "#e4e1d8",
    "gradual_increase": "#6fb6a8",
    "gradual_decrease": "#e0a340",
    "abrupt_increase": "#27507a",
    "abrupt_decrease": "#9c2f2f",
    "insufficient_data": "#ffffff",
}


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

    Parameters
    ----------
    trajectory : xarray.DataArray
        (endmember, y, x) integer codes with CF ``flag_values`` and ``flag_meanings`` attributes.
    """
    values = np.atleast_1d(trajectory.attrs["flag_values"]).astype(int)
    meanings = str(trajectory.attrs["flag_meanings"]).split()
    order = np.argsort(values)
    values = values[order]
    meanings = [meanings[i] for i in order]
    cmap = ListedColormap([TRAJECTORY_COLOURS.get(m, "#999999") for m in meanings])
    bounds = np.concatenate([values - 0.5, [values[-1] + 0.5]])
    norm = BoundaryNorm(bounds, cmap.N)
    names = [str(n) for n in trajectory["endmember"].values]
    fig = Figure(figsize=(2.8 * len(names) + 2.4, 3.0), layout="constrained")
    axes = fig.subplots(1, len(names), squeeze=False)[0]
    extent = _extent(trajectory)
    for ax, name in zip(axes, names):
        ax.imshow(np.asarray(trajectory.sel(endmember=name).values), cmap=cmap, norm=norm,
                  extent=extent, interpolation="nearest")
        ax.set_title(name, fontsize=9)
        ax.set_xticks([])
        ax.set_yticks([])
    from matplotlib.patches import Patch

    handles = [Patch(facecolor=TRAJECTORY_COLOURS.get(m, "#999999"), edgecolor="#555555",
                     label=m.replace("_", " ")) for m in meanings]
    fig.legend(handles=handles, loc="outside right center", fontsize=8, frameon=False)
    return fig


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

