"""Band tables of multispectral sensors and their spectral response functions.

A :class:`Sensor` is a named tuple of :class:`Band` objects. A band's relative spectral response is
either a Gaussian built from its centre and full width at half maximum (FWHM), or a tabulated curve
(wavelength, relative response) read from a file by :func:`unmix.io.library.read_response` and turned
into a sensor by :func:`tabulated_sensor`.

Built-in sensors (ids for :func:`get_sensor`, band tables and their sources): see
:mod:`unmix.sensors.catalogue`. A Gaussian is an approximation of the real, flatter-topped
responses; for exact work load the agency's tabulated responses with
:func:`unmix.io.library.read_response` and :func:`tabulated_sensor`.

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
