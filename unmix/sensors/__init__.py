"""Band tables of multispectral sensors and their spectral response functions.

A :class:`Sensor` is a named tuple of :class:`Band` objects. A band's relative spectral response is
either a Gaussian built from its centre and full width at half maximum (FWHM), or a tabulated curve
(wavelength, relative response) read from a file by :func:`unmix.io.library.read_response` and turned
into a sensor by :func:`tabulated_sensor`.

Built-in sensors (ids for :func:`get_sensor`):

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
and bandwidth. A Gaussian is an approximation of the real, flatter-topped responses; for exact work
load the agency's tabulated responses with :func:`unmix.io.library.read_response` and
:func:`tabulated_sensor`.

Each sensor also names the red and near-infrared bands used by default for NDVI
(:attr:`Sensor.red`, :attr:`Sensor.nir`): TM/ETM+ B3/B4, OLI B4/B5, MSI B4/B8.
"""

from .catalogue import get_sensor, list_sensors
from .responses import FWHM_TO_SIGMA, Band, Sensor, gaussian_response, tabulated_sensor

__all__ = [
    "Band",
    "Sensor",
    "gaussian_response",
    "get_sensor",
    "list_sensors",
    "tabulated_sensor",
    "FWHM_TO_SIGMA",
]
