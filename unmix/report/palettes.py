"""Colours of the report's maps and of the GeoTIFF colour tables: colour-blind safe, readable in grey.

Categorical colours are taken from Paul Tol's colour-blind-safe schemes (Tol 2021) and chosen so
that their CIE 1976 lightness L* differs by at least :data:`MIN_LIGHTNESS_STEP` between any two
classes of one map, so the classes stay apart when printed in grey. No data is a mid grey drawn
with hatching (:data:`NODATA_COLOUR`, :data:`NODATA_HATCH`) that no class uses. Continuous maps use
cividis (fractions, dates, counts; monotone in lightness) and a diverging blue-red map centred on
zero for slopes.

References
----------
Tol, P. (2021). Colour schemes. SRON Technical Note SRON/EPS/TN/09-002, issue 3.2.
https://personal.sron.nl/~pault/data/colourschemes.pdf

Nuñez, J. R., Anderton, C. R., Renslow, R. S. (2018). Optimizing colormaps with consideration for
color vision deficiency to enable accurate interpretation of scientific data. PLoS ONE 13(7):
e0199239. https://doi.org/10.1371/journal.pone.0199239 (cividis)
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

__all__ = [
    "DIVERGING_CMAP",
    "MIN_LIGHTNESS_STEP",
    "NODATA_COLOUR",
    "NODATA_HATCH",
    "NOT_SIGNIFICANT_COLOUR",
    "RULE_COLOURS",
    "SEQUENTIAL_CMAP",
    "SERIES_STYLES",
    "TRAJECTORY_PALETTE",
    "lightness",
]

#: Smallest difference of CIE L* between two classes of one categorical map (0..100 scale).
MIN_LIGHTNESS_STEP = 10.0

#: Trajectory label -> colour. Gains blue, losses red/orange, abrupt darker than gradual, stable a
#: pale yellow, too few dates the no-data grey; lightness steps of at least 11 L* between classes.
TRAJECTORY_PALETTE = {
    "stable": "#EEEEBB",             # Tol light: pale yellow, L* 93
    "gradual_increase": "#88CCEE",   # Tol muted: cyan, L* 79
    "gradual_decrease": "#EE8866",   # Tol light: orange, L* 67
    "abrupt_increase": "#332288",    # Tol muted: indigo, L* 22
    "abrupt_decrease": "#B2182B",    # Tol BuRd: dark red, L* 38
    "insufficient_data": "#808080",  # the no-data grey (hatched in maps), L* 54
}

#: Rule map value label -> colour (false pale, true dark, insufficient data the no-data grey).
RULE_COLOURS = {
    "false": "#EEEEBB",               # Tol light: pale yellow, L* 93
    "true": "#882255",                # Tol muted: wine, L* 32
    "insufficient_data": "#808080",   # no-data grey, L* 54
}

#: No data in every map: mid grey, hatched, with its own legend entry.
NODATA_COLOUR = "#808080"
#: Hatch colour and pattern drawn over no-data pixels.
NODATA_HATCH = ("#404040", "////")
#: Slope maps: pixels without a significant trend after FDR control.
NOT_SIGNIFICANT_COLOUR = "#DDDDDD"   # Tol's pale grey, L* 88; the diverging map's centre is L* 97

#: Sequential map (fractions, dates, counts).
SEQUENTIAL_CMAP = "cividis"
#: Diverging map for slopes (centred on zero by a TwoSlopeNorm).
DIVERGING_CMAP = "RdBu"


def lightness(colours: Iterable) -> np.ndarray:
    """CIE 1976 lightness L* (0 black .. 100 white) of sRGB colours: what a grey print keeps.

    Parameters
    ----------
    colours : iterable of matplotlib colours
        Names, ``#RRGGBB`` strings or RGB(A) tuples in 0..1.

    Returns
    -------
    (n,) float64 ndarray

    References
    ----------
    IEC 61966-2-1:1999 (sRGB transfer function and primaries); CIE 15:2004 (L* from relative
    luminance Y with the D65 white).

    Examples
    --------
    >>> lightness(["#000000", "#FFFFFF"]).round(1)
    array([  0., 100.])
    """
    from matplotlib.colors import to_rgb

    rgb = np.array([to_rgb(c) for c in colours], dtype=float).reshape(-1, 3)
    linear = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    y = linear @ np.array([0.2126, 0.7152, 0.0722])
    eps = 216 / 24389
    return np.where(y > eps, 116 * np.cbrt(y) - 16, 24389 / 27 * y)

#: Lines of time-series plots: Tol's bright scheme, each with its own marker and dash so that the
#: series stay apart in grey print.
SERIES_STYLES = [
    {"color": "#4477AA", "marker": "o", "linestyle": "-"},
    {"color": "#EE6677", "marker": "s", "linestyle": "--"},
    {"color": "#228833", "marker": "^", "linestyle": "-."},
    {"color": "#CCBB44", "marker": "D", "linestyle": ":"},
    {"color": "#66CCEE", "marker": "v", "linestyle": (0, (5, 1))},
    {"color": "#AA3377", "marker": "P", "linestyle": (0, (3, 1, 1, 1, 1, 1))},
]
