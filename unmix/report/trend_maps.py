"""Report maps of a trend product: Sen slopes (significant pixels only), trajectories, change dates
of abrupt pixels and one map per modification rule.

Each function takes the product as opened from ``trends.nc`` and returns a
:class:`matplotlib.figure.Figure` (no pyplot state, nothing saved). Maps state their CRS, carry a
scale bar or longitude / latitude ticks, and give no data (too few dates) a hatched grey that no class
or value uses, with its own legend entry.
"""

from __future__ import annotations

import json

import numpy as np
import xarray as xr
from matplotlib import colormaps
from matplotlib.colors import ListedColormap, TwoSlopeNorm
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from ..dates import decimal_years_or_nan
from ._mapping import crs_caption, decorate, draw_nodata, map_frame, nodata_handle, north_up, rgba_image
from .palettes import (
    DIVERGING_CMAP,
    NOT_SIGNIFICANT_COLOUR,
    RULE_COLOURS,
    SEQUENTIAL_CMAP,
    TRAJECTORY_PALETTE,
)

__all__ = ["change_date_maps", "fdr_q_of", "rule_maps", "slope_maps", "trajectory_maps"]

_INSUFFICIENT = "insufficient_data"


def fdr_q_of(trends: xr.Dataset, default: float = 0.05) -> float:
    """The FDR level the product was made with (its ``parameters`` attribute), else ``default``."""
    try:
        return float(json.loads(trends.attrs.get("parameters", "{}")).get("fdr_q", default))
    except (TypeError, ValueError):
        return default


def _flags(da: xr.DataArray) -> dict[int, str]:
    values = np.atleast_1d(da.attrs["flag_values"]).astype(int)
    return dict(zip(values.tolist(), str(da.attrs["flag_meanings"]).split()))


def _panels(n: int, height: float = 3.0) -> tuple[Figure, np.ndarray]:
    fig = Figure(figsize=(2.9 * n + 2.4, height + 0.5), layout="constrained")
    return fig, fig.subplots(1, n, squeeze=False)[0]


def slope_maps(trends: xr.Dataset, q: float | None = None) -> Figure:
    """Sen slope per endmember on a diverging scale centred on zero; pixels whose trend is not
    significant after FDR control (``q_value > q``) are masked and drawn pale grey.

    Parameters
    ----------
    trends : xarray.Dataset
        ``slope`` and ``q_value`` on (endmember, y, x).
    q : float, optional
        FDR level; default the level the product was made with.

    Returns
    -------
    matplotlib.figure.Figure
        One panel per endmember; the slope image of each holds a masked array whose mask is
        ``q_value > q`` or no value.
    """
    q = fdr_q_of(trends) if q is None else float(q)
    names = [str(n) for n in trends["endmember"].values]
    frame = map_frame(trends)
    slope = north_up(trends["slope"])
    qv = north_up(trends["q_value"])
    nodata = ~np.isfinite(slope)
    masked = nodata | ~(qv <= q)
    significant = np.abs(slope[~masked])
    limit = float(np.percentile(significant, 98)) if significant.size else float(np.nanmax(np.abs(slope), initial=0))
    limit = limit if limit > 0 else 1e-3
    norm = TwoSlopeNorm(vcenter=0.0, vmin=-limit, vmax=limit)
    cmap = colormaps[DIVERGING_CMAP].with_extremes(bad=(0, 0, 0, 0))
    fig, axes = _panels(len(names))
    image = None
    for i, (ax, name) in enumerate(zip(axes, names)):
        background = np.where(masked[i] & ~nodata[i], 1, 0)
        ax.imshow(rgba_image(background, {1: NOT_SIGNIFICANT_COLOUR}), extent=frame.extent, interpolation="nearest")
        image = ax.imshow(np.ma.array(slope[i], mask=masked[i]), cmap=cmap, norm=norm, extent=frame.extent,
                          interpolation="nearest", zorder=2)
        draw_nodata(ax, nodata[i], frame)
        decorate(ax, frame, f"{name}: {int((~masked[i]).sum())} significant pixels")
    fig.colorbar(image, ax=axes, shrink=0.8, extend="both", label="Sen slope [fraction per year]")
    handles = [Patch(facecolor=NOT_SIGNIFICANT_COLOUR, edgecolor="#555555", label=f"not significant (q > {q:g})"),
               nodata_handle("no data (too few dates)")]
    fig.legend(handles=handles, loc="outside right center", fontsize=7, frameon=False)
    crs_caption(fig, frame, "blue = gain, red = loss")
    return fig


def _categorical(fig: Figure, axes, frame, maps: list[np.ndarray], titles: list[str], flags: dict[int, str],
                 palette: dict[str, str], hatched: str, labels: dict[str, str] | None = None) -> None:
    colours = {code: palette[name] for code, name in flags.items() if name != hatched}
    for ax, codes, title in zip(axes, maps, titles):
        ax.imshow(rgba_image(codes, colours), extent=frame.extent, interpolation="nearest")
        missing = ~np.isin(codes, list(colours))
        draw_nodata(ax, missing, frame)
        decorate(ax, frame, title)
    labels = labels or {}
    handles = [Patch(facecolor=palette[name], edgecolor="#555555", label=labels.get(name, name.replace("_", " ")))
               for code, name in flags.items() if name != hatched]
    handles.append(nodata_handle(labels.get(hatched, hatched.replace("_", " "))))
    fig.legend(handles=handles, loc="outside right center", fontsize=7, frameon=False)
    crs_caption(fig, frame)


def trajectory_maps(trends: xr.Dataset | xr.DataArray) -> Figure:
    """One categorical map of trajectory labels per endmember; too few dates is hatched grey.

    Parameters
    ----------
    trends : xarray.Dataset or DataArray
        The product, or its ``trajectory`` (endmember, y, x) with CF ``flag_values`` / ``flag_meanings``.
    """
    traj = trends["trajectory"] if isinstance(trends, xr.Dataset) else trends
    flags = _flags(traj)
    names = [str(n) for n in traj["endmember"].values]
    codes = north_up(traj).astype(int)
    fig, axes = _panels(len(names))
    _categorical(fig, axes, map_frame(traj), list(codes), names, flags, TRAJECTORY_PALETTE, _INSUFFICIENT,
                 {_INSUFFICIENT: "insufficient data (too few dates)"})
    return fig


def rule_maps(trends: xr.Dataset) -> Figure | None:
    """One map per modification rule (true, false, insufficient data); None when the product has no rule."""
    rules = [str(r) for r in trends["rule"].values] if "rule" in trends.coords else []
    rules = [r for r in rules if r in trends.data_vars]
    if not rules:
        return None
    frame = map_frame(trends)
    fig, axes = _panels(len(rules))
    titles = []
    for r in rules:
        area = float(trends["rule_area"].sel(rule=r)) if "rule_area" in trends else float("nan")
        expr = str(trends[r].attrs.get("rule", ""))
        titles.append(f"{r}\n{expr}\ntrue on {area:,.1f} ha" if np.isfinite(area) else f"{r}\n{expr}")
    maps = [north_up(trends[r]).astype(int) for r in rules]
    _categorical(fig, axes, frame, maps, titles, _flags(trends[rules[0]]), RULE_COLOURS, _INSUFFICIENT,
                 {"false": "rule false", "true": "rule true", _INSUFFICIENT: "insufficient data"})
    return fig


def change_date_maps(trends: xr.Dataset) -> Figure:
    """Date of the abrupt change (first date after the break, decimal year) per endmember.

    Pixels without an abrupt change are white (own legend entry); pixels with too few dates are the
    hatched no-data grey. The colour scale stops short of cividis' palest yellow so that white stays apart.
    """
    names = [str(n) for n in trends["endmember"].values]
    frame = map_frame(trends)
    years = decimal_years_or_nan(north_up(trends["change_date"], dtype=None))
    flags = {v: k for k, v in _flags(trends["trajectory"]).items()}
    insufficient = north_up(trends["trajectory"]).astype(int) == flags[_INSUFFICIENT]
    lo, hi = (np.nanmin(years), np.nanmax(years)) if np.isfinite(years).any() else (0.0, 1.0)
    hi = hi if hi > lo else lo + 1.0
    cmap = ListedColormap(colormaps[SEQUENTIAL_CMAP](np.linspace(0.0, 0.85, 256))).with_extremes(bad=(0, 0, 0, 0))
    fig, axes = _panels(len(names))
    image = None
    for i, (ax, name) in enumerate(zip(axes, names)):
        ax.imshow(rgba_image(np.where(np.isnan(years[i]) & ~insufficient[i], 1, 0), {1: "#FFFFFF"}),
                  extent=frame.extent, interpolation="nearest")
        image = ax.imshow(np.ma.masked_invalid(years[i]), cmap=cmap, vmin=lo, vmax=hi, extent=frame.extent,
                          interpolation="nearest", zorder=2)
        draw_nodata(ax, insufficient[i], frame)
        decorate(ax, frame, f"{name}: {int(np.isfinite(years[i]).sum())} abrupt pixels")
    fig.colorbar(image, ax=axes, shrink=0.8, label="first date after the break [decimal year]", format="{x:.1f}")
    handles = [Patch(facecolor="#FFFFFF", edgecolor="#555555", label="no abrupt change"),
               nodata_handle("insufficient data (too few dates)")]
    fig.legend(handles=handles, loc="outside right center", fontsize=7, frameon=False)
    crs_caption(fig, frame)
    return fig
