"""Map furniture shared by the report's maps: extent, CRS caption, scale bar or lon/lat ticks, the
hatched no-data layer and legend entries (matplotlib only, no extra dependency)."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
import xarray as xr
from matplotlib.axes import Axes
from matplotlib.colors import to_rgba
from matplotlib.patches import Patch, Rectangle

from ..cube.georef import georef_of
from .palettes import NODATA_COLOUR, NODATA_HATCH

__all__ = ["MapFrame", "crs_caption", "decorate", "draw_nodata", "map_frame", "nice_length", "nodata_handle",
           "north_up", "rgba_image", "DISPLAY_LIMIT"]


@dataclass(frozen=True)
class MapFrame:
    """Where a map sits and what its coordinates mean.

    Attributes
    ----------
    extent : list of float
        [left, right, bottom, top] in map units (pixel edges).
    crs_name : str
        Human-readable CRS ("WGS 84 / UTM zone 33N (EPSG:32633)"), or "unknown CRS".
    geographic : bool
        Coordinates are longitude / latitude [degrees].
    metres_per_unit : float or None
        Length of one map unit [m] in a projected CRS (None when geographic or unknown).
    """

    extent: list[float]
    crs_name: str
    geographic: bool
    metres_per_unit: float | None


def map_frame(da: xr.DataArray | xr.Dataset) -> MapFrame:
    """The :class:`MapFrame` of a georeferenced array (``spatial_ref`` or ``crs_wkt``, x/y coordinates)."""
    x = np.asarray(da["x"].values, dtype=float)
    y = np.asarray(da["y"].values, dtype=float)
    dx = abs(x[1] - x[0]) if x.size > 1 else 1.0
    dy = abs(y[1] - y[0]) if y.size > 1 else dx
    extent = [x.min() - dx / 2, x.max() + dx / 2, y.min() - dy / 2, y.max() + dy / 2]
    wkt, _ = georef_of(da)
    if not wkt:
        return MapFrame(extent, "unknown CRS", False, None)
    from rasterio.crs import CRS

    crs = CRS.from_wkt(wkt)
    epsg = crs.to_epsg()
    name = _crs_name(crs.to_wkt())
    label = f"{name} (EPSG:{epsg})" if epsg else name
    if crs.is_geographic:
        return MapFrame(extent, label, True, None)
    _, factor = crs.linear_units_factor
    return MapFrame(extent, label, False, float(factor))


def _crs_name(wkt: str) -> str:
    """The name a WKT gives its CRS (its first quoted string), e.g. "WGS 84 / UTM zone 33N"."""
    match = re.search(r'"([^"]*)"', wkt)
    return match.group(1) if match else "unnamed CRS"


#: Longest side [pixels] of a map as drawn; larger maps are thinned (every k-th pixel) for display.
DISPLAY_LIMIT = 1500


def north_up(da: xr.DataArray, dtype=float, limit: int | None = DISPLAY_LIMIT) -> np.ndarray:
    """Values of a (..., y, x) array (as ``dtype``; None keeps it) with the first row the northernmost.

    With ``limit``, a map longer than ``limit`` pixels is read at every k-th row and column (k the
    smallest step that fits), which is what a figure a few inches wide can show anyway; statistics
    are computed on the full map by the callers, never on the thinned one.
    """
    step = 1
    if limit is not None:
        step = max(1, math.ceil(max(da.sizes["y"], da.sizes["x"]) / limit))
    if step > 1:
        da = da.isel(y=slice(None, None, step), x=slice(None, None, step))
    values = np.asarray(da.values, dtype=dtype)
    y = np.asarray(da["y"].values)
    if y.size > 1 and y[0] < y[-1]:
        values = values[..., ::-1, :]
    return values


def nice_length(span: float) -> float:
    """A round scale-bar length (1, 2 or 5 times a power of ten) of at most a quarter of ``span``.

    Examples
    --------
    >>> nice_length(1234.0), nice_length(90.0)
    (200.0, 20.0)
    """
    target = span / 4.0
    power = 10.0 ** math.floor(math.log10(target))
    for step in (5.0, 2.0, 1.0):
        if step * power <= target:
            return step * power
    return power


def _scale_bar(ax: Axes, frame: MapFrame) -> None:
    left, right, bottom, top = frame.extent
    metres = nice_length((right - left) * frame.metres_per_unit)
    length = metres / frame.metres_per_unit  # in map units
    height = 0.025 * (top - bottom)
    x0 = left + 0.05 * (right - left)
    y0 = bottom + 0.05 * (top - bottom)
    half = length / 2
    for i, colour in enumerate(("#000000", "#FFFFFF")):
        ax.add_patch(Rectangle((x0 + i * half, y0), half, height, facecolor=colour, edgecolor="#000000",
                               linewidth=0.6, zorder=5, gid="scale_bar"))
    text = f"{metres / 1000:g} km" if metres >= 1000 else f"{metres:g} m"
    ax.text(x0 + length / 2, y0 + 1.6 * height, text, ha="center", va="bottom", fontsize=7, zorder=5,
            gid="scale_bar_label", bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.7, "pad": 1})


def decorate(ax: Axes, frame: MapFrame, title: str | None = None) -> None:
    """Title, then a scale bar (projected CRS) or longitude / latitude ticks (geographic or unknown)."""
    ax.set_xlim(frame.extent[0], frame.extent[1])
    ax.set_ylim(frame.extent[2], frame.extent[3])
    ax.set_aspect("equal")
    if title:
        ax.set_title(title, fontsize=8)
    if frame.metres_per_unit is not None:
        ax.set_xticks([])
        ax.set_yticks([])
        _scale_bar(ax, frame)
    elif frame.geographic:
        ax.tick_params(labelsize=6)
        ax.xaxis.set_major_formatter(lambda v, _: f"{abs(v):.4g}°{'E' if v >= 0 else 'W'}")
        ax.yaxis.set_major_formatter(lambda v, _: f"{abs(v):.4g}°{'N' if v >= 0 else 'S'}")
    else:
        ax.tick_params(labelsize=6)
        ax.set_xlabel("x [map units]", fontsize=6)
        ax.set_ylabel("y [map units]", fontsize=6)


def rgba_image(codes: np.ndarray, colours: dict[int, str]) -> np.ndarray:
    """(y, x) integer codes -> (y, x, 4) RGBA floats; codes without a colour are transparent."""
    out = np.zeros((*codes.shape, 4), dtype=np.float32)
    for code, colour in colours.items():
        out[codes == code] = to_rgba(colour)
    return out


def draw_nodata(ax: Axes, mask: np.ndarray, frame: MapFrame, *, zorder: float = 3) -> None:
    """Paint ``mask`` pixels mid grey with dark diagonal stripes (a raster hatch, exact to the pixel).

    The image is repeated ``k`` times per pixel (so stripes show on small maps) and the stripes run
    across pixel boundaries; pixels outside ``mask`` are transparent.
    """
    mask = np.asarray(mask, dtype=bool)
    if not mask.any():
        return
    k = int(min(16, max(1, math.ceil(480 / max(mask.shape)))))
    big = np.repeat(np.repeat(mask, k, axis=0), k, axis=1)
    rows, cols = np.indices(big.shape)
    stripe = ((rows + cols) % 8) < 2
    image = np.zeros((*big.shape, 4), dtype=np.float32)
    image[big] = to_rgba(NODATA_COLOUR)
    image[big & stripe] = to_rgba(NODATA_HATCH[0])
    ax.imshow(image, extent=frame.extent, interpolation="nearest", zorder=zorder, origin="upper",
              aspect="auto")


def nodata_handle(label: str = "no data") -> Patch:
    """Legend entry of the hatched no-data grey."""
    return Patch(facecolor=NODATA_COLOUR, edgecolor=NODATA_HATCH[0], hatch=NODATA_HATCH[1], label=label)


def crs_caption(fig, frame: MapFrame, extra: str = "") -> None:
    """State the CRS (and units) under the figure."""
    fig.supxlabel(f"CRS: {frame.crs_name}" + (f"; {extra}" if extra else ""), fontsize=7, color="#333333")
