"""The built-in sensor catalogue: Landsat TM/ETM+/OLI/OLI-2 and Sentinel-2 MSI, measured responses.

=====================  =============================================================================
id                     bands (agency band names)
=====================  =============================================================================
``landsat-5-tm``       Landsat 5 TM reflective bands B1-B5, B7 (thermal B6 left out)
``landsat-7-etm``      Landsat 7 ETM+ reflective bands B1-B5, B7 (thermal B6, panchromatic B8 left out)
``landsat-8-oli``      Landsat 8 OLI B1-B7 and cirrus B9 (panchromatic B8 and the TIRS bands left out)
``landsat-9-oli``      Landsat 9 OLI-2, the same bands as OLI
``sentinel-2a-msi``    Sentinel-2A MSI, all 13 bands B1-B12 with B8A
``sentinel-2b-msi``    Sentinel-2B MSI, all 13 bands B1-B12 with B8A
=====================  =============================================================================

Every built-in band is **tabulated**: its response is the agency's measured relative spectral
response (USGS for TM and ETM+, NASA/Ball Aerospace for OLI and OLI-2, ESA for MSI), shipped with the
package in ``unmix/data/`` (one CSV per sensor, the layout of a response file; ``sensor_responses.json``
there names each table's document, and each sensor's ``source`` quotes it). Between the table's samples
the response is linear; outside the band's own stretch of the table, zero (see
:func:`unmix.sensors.tabulated_sensor`: where the shared table jumps from a band's last sample across
another band's range, the band ends at its last sample instead of ramping down across the gap). The
only change to the agencies' numbers: negative noise values (at most -0.009) are set to 0.

Each band's numbers shown by ``unmix sensors`` are derived from its table:

* ``fwhm_nm``: full width between the outermost crossings of half maximum, linearly interpolated
  (:func:`unmix.sensors.half_maximum_points`; NASA's OLI band summary gives these crossings).
* ``centre_nm``: the response-weighted mean wavelength. It is the wavelength at which a spectrum that is
  linear across the band is sampled exactly by the band (so it is the natural abscissa of a resampled
  library), it does not depend on the 0.5 threshold, and it is the central wavelength ESA publishes for
  MSI (ESA's values are reproduced within 0.1 nm). It differs from the mid-point of the half-maximum
  points (NASA's definition of an OLI centre) by at most 0.6 nm for OLI and 0.9 nm for OLI-2, and by up
  to 5.7 nm for the skewed TM and ETM+ responses (TM B7) and 2.7 nm for MSI (B12).

The tables are read lazily, once, from the package's own data (:mod:`importlib.resources`: a checkout,
an editable install and a wheel alike); no user path is involved.
"""

from __future__ import annotations

import functools
import importlib.resources
import json

import numpy as np

from ..errors import UnknownNameError
from .responses import Sensor, tabulated_sensor

__all__ = ["get_sensor", "list_sensors"]

#: id -> (table file in unmix/data, title, NDVI red band, NDVI NIR band, bands left out)
_BUILTIN_TABLES: dict[str, tuple[str, str, str, str, str]] = {
    "landsat-5-tm": ("landsat5_tm_rsr.csv", "Landsat 5 Thematic Mapper (reflective bands)", "B3", "B4",
                     "thermal B6 not included"),
    "landsat-7-etm": ("landsat7_etm_rsr.csv", "Landsat 7 Enhanced Thematic Mapper Plus (reflective bands)",
                      "B3", "B4", "thermal B6 and panchromatic B8 not included"),
    "landsat-8-oli": ("landsat8_oli_rsr.csv", "Landsat 8 Operational Land Imager (reflective bands)", "B4",
                      "B5", "panchromatic B8 and the thermal TIRS bands not included"),
    "landsat-9-oli": ("landsat9_oli2_rsr.csv", "Landsat 9 Operational Land Imager 2 (reflective bands)",
                      "B4", "B5", "panchromatic B8 and the thermal TIRS-2 bands not included"),
    "sentinel-2a-msi": ("sentinel2a_msi_srf.csv", "Sentinel-2A MultiSpectral Instrument", "B4", "B8",
                        "all 13 bands"),
    "sentinel-2b-msi": ("sentinel2b_msi_srf.csv", "Sentinel-2B MultiSpectral Instrument", "B4", "B8",
                        "all 13 bands"),
}

_DATA = "data"
_SOURCES = "sensor_responses.json"


def _data_text(name: str) -> str:
    return (importlib.resources.files("unmix") / _DATA / name).read_text(encoding="utf-8")


@functools.cache
def _documents() -> dict:
    return json.loads(_data_text(_SOURCES))["files"]


@functools.cache
def _builtin(sensor_id: str) -> Sensor:
    """Build a built-in sensor from its shipped table (once per process)."""
    fname, title, red, nir, note = _BUILTIN_TABLES[sensor_id]
    lines = _data_text(fname).splitlines()
    header = [h.strip() for h in lines[0].split(",")]
    table = np.loadtxt(lines[1:], delimiter=",", ndmin=2)
    doc = _documents()[fname]["document"]
    return tabulated_sensor(
        sensor_id,
        table[:, 0],
        table[:, 1:].T,
        header[1:],
        title=title,
        source=f"{doc}; measured responses shipped as unmix/data/{fname} (negative noise values set to 0); "
               f"{note}.",
        red=red,
        nir=nir,
    )


def list_sensors() -> tuple[str, ...]:
    """Ids of the built-in sensors, in a fixed order.

    Examples
    --------
    >>> "landsat-8-oli" in list_sensors()
    True
    """
    return tuple(_BUILTIN_TABLES)


def get_sensor(sensor_id: str | Sensor) -> Sensor:
    """The built-in sensor with id ``sensor_id`` (a :class:`Sensor` is passed through).

    Ids are matched case-insensitively; an unknown id raises :class:`unmix.errors.UnknownNameError`
    listing the known ids.

    Examples
    --------
    >>> round(get_sensor("sentinel-2a-msi").band("B8A").centre_nm, 1)
    864.7
    """
    if isinstance(sensor_id, Sensor):
        return sensor_id
    key = str(sensor_id).strip().lower()
    if key in _BUILTIN_TABLES:
        return _builtin(key)
    raise UnknownNameError(
        f"unknown sensor {sensor_id!r}; known sensors are: {', '.join(_BUILTIN_TABLES)} "
        "(or give a response table: --response FILE, or unmix.io.library.read_response_sensor)"
    )
