"""Decoding the agencies' quality bands into a "no data" mask, by names the analyst can change.

Landsat Collection 2 ``QA_PIXEL`` (bit flags) and Sentinel-2 Level-2A ``SCL`` (scene classes) each get a
table of names; a mask set is a tuple of those names. Constants are cited beside each table.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ...errors import UnknownNameError

__all__ = ["LANDSAT_QA_BITS", "LANDSAT_DEFAULT_MASK", "SCL_CLASSES", "SCL_DEFAULT_MASK", "quality_names",
           "default_mask", "check_mask", "masked"]

# Landsat Collection 2 Level-2 QA_PIXEL bit designations: USGS Landsat 8-9 Collection 2 Level 2 Science
# Product Guide (LSDS-1619) and Landsat 4-7 Collection 2 Level 2 Science Product Guide (LSDS-1618), table
# "Pixel Quality Assessment (QA_PIXEL) Bit Index" (from memory of the guides). Bit 2 (cirrus) is set by
# OLI/OLI-2 only; it is 0 in TM and ETM+ products.
LANDSAT_QA_BITS = {
    "fill": 0,
    "dilated_cloud": 1,
    "cirrus": 2,
    "cloud": 3,
    "cloud_shadow": 4,
    "snow": 5,
    "clear": 6,
    "water": 7,
}
LANDSAT_DEFAULT_MASK = ("fill", "dilated_cloud", "cirrus", "cloud", "cloud_shadow", "snow")

# Sentinel-2 Level-2A scene classification (SCL) values: ESA Sentinel-2 Level-2A Product Specification
# (S2-PDGS-MPC-L2A-PSD) and the Sen2Cor configuration, scene classification legend (from memory of the
# documents). Class 2 was "dark area pixels" before processing baseline 04.00 and is "cast shadows" since.
SCL_CLASSES = {
    "no_data": 0,
    "defective": 1,
    "cast_shadow": 2,
    "cloud_shadow": 3,
    "vegetation": 4,
    "not_vegetated": 5,
    "water": 6,
    "unclassified": 7,
    "cloud_medium": 8,
    "cloud_high": 9,
    "thin_cirrus": 10,
    "snow": 11,
}
SCL_DEFAULT_MASK = ("no_data", "defective", "cloud_shadow", "cloud_medium", "cloud_high", "thin_cirrus", "snow")

_TABLES = {"landsat-qa-pixel": LANDSAT_QA_BITS, "sentinel-2-scl": SCL_CLASSES}
_DEFAULTS = {"landsat-qa-pixel": LANDSAT_DEFAULT_MASK, "sentinel-2-scl": SCL_DEFAULT_MASK}


def quality_names(kind: str) -> tuple[str, ...]:
    """Every name a mask set of quality band ``kind`` may use."""
    return tuple(_TABLES[kind])


def default_mask(kind: str) -> tuple[str, ...]:
    """The names masked unless the user chooses others."""
    return _DEFAULTS[kind]


def check_mask(kind: str, names: Sequence[str]) -> tuple[str, ...]:
    """``names`` checked against the table of ``kind`` (UnknownNameError listing the valid names)."""
    table = _TABLES[kind]
    unknown = [n for n in names if n not in table]
    if unknown:
        what = "Landsat QA_PIXEL flag" if kind == "landsat-qa-pixel" else "Sentinel-2 SCL class"
        raise UnknownNameError(f"unknown {what}(s) {', '.join(unknown)}; use any of {', '.join(table)}")
    return tuple(names)


def masked(kind: str, values: np.ndarray, names: Sequence[str]) -> np.ndarray:
    """True where a quality value marks one of ``names``.

    Examples
    --------
    >>> masked("landsat-qa-pixel", np.array([21824, 22280, 1]), ("fill", "cloud"))  # clear, cloud, fill
    array([False,  True,  True])
    >>> masked("sentinel-2-scl", np.array([4, 9, 0]), SCL_DEFAULT_MASK)
    array([False,  True,  True])
    """
    table = _TABLES[kind]
    values = np.asarray(values)
    if kind == "landsat-qa-pixel":
        bits = 0
        for n in names:
            bits |= 1 << table[n]
        return (values.astype(np.int64) & bits) != 0
    codes = np.array([table[n] for n in names], dtype=np.int64)
    return np.isin(values.astype(np.int64), codes)
