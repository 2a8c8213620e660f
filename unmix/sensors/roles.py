"""Band roles: which band of each built-in sensor plays blue, green, red, nir, swir1 and swir2.

A record that switches sensor (Landsat 5 TM, 7 ETM+, 8 OLI, 9 OLI-2, Sentinel-2 MSI) is stacked by
role, not by band name: TM band 3 and OLI band 4 are both the red band. The table follows each
agency's band designations (USGS Landsat 4-7 and 8-9 Data Users Handbooks; ESA Sentinel-2 User
Handbook); for Sentinel-2 the narrow near-infrared band B8A is the ``nir`` role because its width and
position match the Landsat OLI near-infrared band (common practice in harmonised Landsat/Sentinel-2
records), and the broad B8 has the role ``nir_broad``.
"""

from __future__ import annotations

from collections.abc import Sequence

from ..errors import UnknownNameError

__all__ = ["ROLES", "DEFAULT_ROLES", "band_roles", "bands_for_roles", "role_of_description"]

#: Every role a band can have, in spectral order.
ROLES = ("coastal", "blue", "green", "red", "red_edge1", "red_edge2", "red_edge3", "nir_broad", "nir", "swir1",
         "swir2")
#: The roles shared by every built-in sensor: the default set a multi-sensor record is stacked on.
DEFAULT_ROLES = ("blue", "green", "red", "nir", "swir1", "swir2")

_TM = {"blue": "B1", "green": "B2", "red": "B3", "nir": "B4", "swir1": "B5", "swir2": "B7"}
_OLI = {"coastal": "B1", "blue": "B2", "green": "B3", "red": "B4", "nir": "B5", "swir1": "B6", "swir2": "B7"}
_MSI = {"coastal": "B1", "blue": "B2", "green": "B3", "red": "B4", "red_edge1": "B5", "red_edge2": "B6",
        "red_edge3": "B7", "nir_broad": "B8", "nir": "B8A", "swir1": "B11", "swir2": "B12"}

_TABLE = {
    "landsat-5-tm": _TM,
    "landsat-7-etm": _TM,
    "landsat-8-oli": _OLI,
    "landsat-9-oli": _OLI,
    "sentinel-2a-msi": _MSI,
    "sentinel-2b-msi": _MSI,
    "sentinel-2c-msi": _MSI,
}

# band descriptions written into files by common tools, lower-cased, mapped to a role
_DESCRIPTIONS = {
    "coastal": "coastal", "coastal aerosol": "coastal", "blue": "blue", "green": "green", "red": "red",
    "nir": "nir", "near infrared": "nir", "near-infrared": "nir", "nir08": "nir", "nir narrow": "nir",
    "swir1": "swir1", "swir 1": "swir1", "swir16": "swir1", "swir-1": "swir1",
    "swir2": "swir2", "swir 2": "swir2", "swir22": "swir2", "swir-2": "swir2",
    "red edge 1": "red_edge1", "rededge1": "red_edge1", "red edge 2": "red_edge2", "rededge2": "red_edge2",
    "red edge 3": "red_edge3", "rededge3": "red_edge3",
}


def band_roles(sensor_id: str) -> dict[str, str]:
    """Role -> band name of a built-in sensor.

    Examples
    --------
    >>> band_roles("landsat-5-tm")["red"], band_roles("landsat-8-oli")["red"]
    ('B3', 'B4')
    """
    try:
        return dict(_TABLE[sensor_id])
    except KeyError:
        raise UnknownNameError(f"no band roles are known for sensor {sensor_id!r}; known: {', '.join(_TABLE)}") from None


def bands_for_roles(sensor_id: str, roles: Sequence[str] = DEFAULT_ROLES) -> list[str]:
    """Band names of ``sensor_id`` for ``roles``, in the order of ``roles``."""
    table = band_roles(sensor_id)
    unknown = [r for r in roles if r not in ROLES]
    if unknown:
        raise UnknownNameError(f"unknown band role(s) {', '.join(unknown)}; roles are {', '.join(ROLES)}")
    missing = [r for r in roles if r not in table]
    if missing:
        raise UnknownNameError(f"sensor {sensor_id} has no {', '.join(missing)} band; choose roles among "
                               f"{', '.join(table)}")
    return [table[r] for r in roles]


def role_of_description(description: str | None) -> str | None:
    """The role a band description such as 'Red' or 'SWIR1' names, or None.

    Examples
    --------
    >>> role_of_description("SWIR 1"), role_of_description("Red"), role_of_description("B4")
    ('swir1', 'red', None)
    """
    if not description:
        return None
    key = " ".join(str(description).strip().lower().replace("_", " ").split())
    if key in _DESCRIPTIONS:
        return _DESCRIPTIONS[key]
    return key if key in ROLES else None
