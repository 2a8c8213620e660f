"""Band tables of multispectral sensors and their spectral response functions.

A :class:`Sensor` is a named tuple of :class:`Band` objects. A band's relative spectral response is
either a tabulated curve (wavelength, relative response; :func:`tabulated_sensor`) or a Gaussian built
from a centre and full width at half maximum (FWHM; :func:`gaussian_response`) for a sensor a user
defines by centre and width.

Built-in sensors (ids for :func:`get_sensor`): the agencies' measured response tables shipped in
``unmix/data/``, see :mod:`unmix.sensors.catalogue`. Any other sensor: a response CSV read by
:func:`unmix.io.library.read_response_sensor`.

Each sensor also names the red and near-infrared bands used by default for NDVI
(:attr:`Sensor.red`, :attr:`Sensor.nir`): TM/ETM+ B3/B4, OLI B4/B5, MSI B4/B8.
"""

from .catalogue import get_sensor, list_sensors
from .responses import FWHM_TO_SIGMA, Band, Sensor, gaussian_response, half_maximum_points, tabulated_sensor

__all__ = [
    "Band",
    "Sensor",
    "gaussian_response",
    "half_maximum_points",
    "get_sensor",
    "list_sensors",
    "tabulated_sensor",
    "FWHM_TO_SIGMA",
]
