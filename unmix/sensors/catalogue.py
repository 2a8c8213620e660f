"""The built-in sensor catalogue: band tables of Landsat TM/ETM+/OLI and Sentinel-2 MSI.

=====================  =============================================================================
id                     bands
=====================  =============================================================================
``landsat-5-tm``       Landsat 4-5 TM reflective bands B1-B5, B7 (thermal B6 left out)
``landsat-7-etm``      Landsat 7 ETM+ reflective bands B1-B5, B7 (thermal B6, panchromatic B8 left out)
``landsat-8-oli``      Landsat 8 OLI B1-B7 and cirrus B9 (panchromatic B8 and the TIRS bands left out)
``landsat-9-oli``      Landsat 9 OLI-2, same nominal bands as OLI
``sentinel-2a-msi``    Sentinel-2A MSI, all 13 bands B1-B12 with B8A
``sentinel-2b-msi``    Sentinel-2B MSI, all 13 bands B1-B12 with B8A
=====================  =============================================================================

The Landsat tables are published as band edges (lower and upper wavelength); they are turned into a
Gaussian with centre = mid-point and FWHM = edge width. The Sentinel-2 tables are published as centre
and bandwidth. Each sensor also names its default red and near-infrared bands for NDVI.
"""

from __future__ import annotations

from collections.abc import Iterable

from ..errors import UnknownNameError
from .responses import Band, Sensor

__all__ = ["get_sensor", "list_sensors"]


def _from_edges_um(table: Iterable[tuple[str, float, float]]) -> tuple[Band, ...]:
    """Bands from (name, lower edge, upper edge) in micrometres: centre = mid-point, FWHM = width."""
    return tuple(
        Band(name, round((lo + hi) / 2 * 1000.0, 6), round((hi - lo) * 1000.0, 6)) for name, lo, hi in table
    )


def _from_centre_width_nm(table: Iterable[tuple[str, float, float]]) -> tuple[Band, ...]:
    return tuple(Band(name, c, w) for name, c, w in table)


# Landsat 4-5 TM, reflective bands. Source: USGS Landsat 4-5 TM band designations (Landsat 4-7 Data
# Users Handbook), band edges in micrometres; from memory.
_TM_EDGES = [
    ("B1", 0.45, 0.52),
    ("B2", 0.52, 0.60),
    ("B3", 0.63, 0.69),
    ("B4", 0.76, 0.90),
    ("B5", 1.55, 1.75),
    ("B7", 2.08, 2.35),
]

# Landsat 7 ETM+, reflective bands. Source: USGS Landsat 7 Data Users Handbook, band edges in
# micrometres; from memory.
_ETM_EDGES = [
    ("B1", 0.45, 0.52),
    ("B2", 0.52, 0.60),
    ("B3", 0.63, 0.69),
    ("B4", 0.77, 0.90),
    ("B5", 1.55, 1.75),
    ("B7", 2.09, 2.35),
]

# Landsat 8 OLI and Landsat 9 OLI-2 (same nominal bands). Source: USGS Landsat 8 Data Users Handbook,
# band edges in micrometres, B1-B7 as in CHECKS.md (from memory, cross-checked with secondary copies);
# cirrus B9 1.360-1.390 from memory.
_OLI_EDGES = [
    ("B1", 0.433, 0.453),
    ("B2", 0.450, 0.515),
    ("B3", 0.525, 0.600),
    ("B4", 0.630, 0.680),
    ("B5", 0.845, 0.885),
    ("B6", 1.560, 1.660),
    ("B7", 2.100, 2.300),
    ("B9", 1.360, 1.390),
]

# Sentinel-2A MSI. Source: ESA Sentinel-2 spectral response functions, document
# COPE-GSEG-EOPG-TN-15-0007, central wavelength / bandwidth [nm] as in CHECKS.md. Pinned to those values
# (the document's issue 3.0 as far as we know; ESA has revised them slightly in later issues).
_S2A_CENTRE_WIDTH = [
    ("B1", 442.7, 21.0),
    ("B2", 492.4, 66.0),
    ("B3", 559.8, 36.0),
    ("B4", 664.6, 31.0),
    ("B5", 704.1, 15.0),
    ("B6", 740.5, 15.0),
    ("B7", 782.8, 20.0),
    ("B8", 832.8, 106.0),
    ("B8A", 864.7, 21.0),
    ("B9", 945.1, 20.0),
    ("B10", 1373.5, 31.0),
    ("B11", 1613.7, 91.0),
    ("B12", 2202.4, 175.0),
]

# Sentinel-2B MSI. Source: same ESA document, Sentinel-2B columns (issue 3.0); from memory.
_S2B_CENTRE_WIDTH = [
    ("B1", 442.2, 21.0),
    ("B2", 492.1, 66.0),
    ("B3", 559.0, 36.0),
    ("B4", 664.9, 31.0),
    ("B5", 703.8, 16.0),
    ("B6", 739.1, 15.0),
    ("B7", 779.7, 20.0),
    ("B8", 832.9, 106.0),
    ("B8A", 864.0, 22.0),
    ("B9", 943.2, 21.0),
    ("B10", 1376.9, 30.0),
    ("B11", 1610.4, 94.0),
    ("B12", 2185.7, 185.0),
]

_GAUSS_NOTE = " Responses modelled as Gaussians (centre = mid-point of the edges, FWHM = edge width)."

_BUILTIN: dict[str, Sensor] = {
    s.id: s
    for s in (
        Sensor(
            "landsat-5-tm",
            "Landsat 4-5 Thematic Mapper (reflective bands)",
            _from_edges_um(_TM_EDGES),
            "USGS Landsat 4-7 Data Users Handbook, TM band edges (from memory); thermal B6 not included."
            + _GAUSS_NOTE,
            red="B3",
            nir="B4",
        ),
        Sensor(
            "landsat-7-etm",
            "Landsat 7 Enhanced Thematic Mapper Plus (reflective bands)",
            _from_edges_um(_ETM_EDGES),
            "USGS Landsat 7 Data Users Handbook, ETM+ band edges (from memory); thermal B6 and "
            "panchromatic B8 not included." + _GAUSS_NOTE,
            red="B3",
            nir="B4",
        ),
        Sensor(
            "landsat-8-oli",
            "Landsat 8 Operational Land Imager (reflective bands)",
            _from_edges_um(_OLI_EDGES),
            "USGS Landsat 8 Data Users Handbook, OLI band edges (from memory, cross-checked with secondary "
            "copies); panchromatic B8 and the thermal TIRS bands not included." + _GAUSS_NOTE,
            red="B4",
            nir="B5",
        ),
        Sensor(
            "landsat-9-oli",
            "Landsat 9 Operational Land Imager 2 (reflective bands)",
            _from_edges_um(_OLI_EDGES),
            "USGS Landsat 9 Data Users Handbook: OLI-2 has the nominal band edges of Landsat 8 OLI (from "
            "memory); panchromatic B8 and the thermal TIRS-2 bands not included." + _GAUSS_NOTE,
            red="B4",
            nir="B5",
        ),
        Sensor(
            "sentinel-2a-msi",
            "Sentinel-2A MultiSpectral Instrument",
            _from_centre_width_nm(_S2A_CENTRE_WIDTH),
            "ESA document COPE-GSEG-EOPG-TN-15-0007 (Sentinel-2 spectral response functions), Sentinel-2A "
            "central wavelength and bandwidth, values pinned as of issue 3.0. Responses modelled as "
            "Gaussians (FWHM = bandwidth).",
            red="B4",
            nir="B8",
        ),
        Sensor(
            "sentinel-2b-msi",
            "Sentinel-2B MultiSpectral Instrument",
            _from_centre_width_nm(_S2B_CENTRE_WIDTH),
            "ESA document COPE-GSEG-EOPG-TN-15-0007 (Sentinel-2 spectral response functions), Sentinel-2B "
            "central wavelength and bandwidth as of issue 3.0 (from memory). Responses modelled as "
            "Gaussians (FWHM = bandwidth).",
            red="B4",
            nir="B8",
        ),
    )
}


def list_sensors() -> tuple[str, ...]:
    """Ids of the built-in sensors, in a fixed order.

    Examples
    --------
    >>> "landsat-8-oli" in list_sensors()
    True
    """
    return tuple(_BUILTIN)


def get_sensor(sensor_id: str | Sensor) -> Sensor:
    """The built-in sensor with id ``sensor_id`` (a :class:`Sensor` is passed through).

    Ids are matched case-insensitively; an unknown id raises :class:`unmix.errors.UnknownNameError`
    listing the known ids.

    Examples
    --------
    >>> get_sensor("sentinel-2a-msi").band("B8A").centre_nm
    864.7
    """
    if isinstance(sensor_id, Sensor):
        return sensor_id
    key = str(sensor_id).strip().lower()
    if key in _BUILTIN:
        return _BUILTIN[key]
    raise UnknownNameError(
        f"unknown sensor {sensor_id!r}; known sensors are: {', '.join(_BUILTIN)} "
        "(or build one from a response table with tabulated_sensor)"
    )
