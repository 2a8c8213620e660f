"""Vegetation index from named bands: the normalised difference vegetation index (NDVI)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..errors import BandMismatchError, InputError, ShapeError, UnknownNameError
from ..sensors import Sensor, get_sensor
from .library import SpectralLibrary
from .resampling import resample

__all__ = ["ndvi"]


def ndvi(
    values,
    band_names: Sequence[str] | None = None,
    *,
    red: str | None = None,
    nir: str | None = None,
    sensor: str | Sensor | None = None,
) -> np.ndarray:
    """Normalised difference vegetation index (NIR - red) / (NIR + red) from named bands.

    Parameters
    ----------
    values : (..., n_bands) array_like or SpectralLibrary
        Band reflectance (core dimension last), or a library. A resampled library brings its own band
        names and sensor; a full-resolution library is first resampled to the red and NIR bands of
        ``sensor``.
    band_names : sequence of str, optional
        Names of the ``n_bands`` bands of an array (ignored for a library).
    red, nir : str, optional
        Names of the red and near-infrared bands. Default: the sensor's (``Sensor.red``/``Sensor.nir``:
        TM/ETM+ B3/B4, OLI B4/B5, MSI B4/B8).
    sensor : str or Sensor, optional
        Supplies the default red/NIR names (and the responses for a full-resolution library).

    Returns
    -------
    (...) ndarray
        NDVI, -1..1; NaN where red + NIR is 0 or a value is NaN. float32 in gives float32 out.

    References
    ----------
    Rouse, J. W., Haas, R. H., Schell, J. A., and Deering, D. W. (1974). Monitoring vegetation systems
    in the Great Plains with ERTS. Third ERTS Symposium, NASA SP-351, 309-317.
    Tucker, C. J. (1979). Red and photographic infrared linear combinations for monitoring vegetation.
    Remote Sensing of Environment 8(2), 127-150. https://doi.org/10.1016/0034-4257(79)90013-0

    Examples
    --------
    >>> float(ndvi([0.05, 0.45], ["B4", "B5"], sensor="landsat-8-oli"))
    0.8
    """
    if isinstance(values, SpectralLibrary):
        lib = values
        if sensor is None:
            sensor = lib.sensor
        if not lib.resampled:
            if sensor is None:
                raise BandMismatchError(
                    "NDVI of a full-resolution library needs a sensor to resample to (sensor=...)"
                )
            s = get_sensor(sensor)
            red = red or s.red
            nir = nir or s.nir
            if red is None or nir is None:
                raise InputError(f"sensor {s.id} has no default red/NIR bands; pass red= and nir=")
            lib = resample(lib, s, [red, nir])
        x = lib.spectra
        band_names = lib.band_names
    else:
        x = np.asarray(values)
    if band_names is None:
        raise InputError("ndvi needs band_names for an array (one name per value along the last axis)")
    band_names = list(band_names)
    if red is None or nir is None:
        if sensor is None:
            raise InputError("ndvi needs the red and NIR band names: pass red= and nir=, or sensor=")
        s = get_sensor(sensor)
        red = red or s.red
        nir = nir or s.nir
        if red is None or nir is None:
            raise InputError(f"sensor {s.id} has no default red/NIR bands; pass red= and nir=")
    if x.shape[-1:] != (len(band_names),):
        raise ShapeError(f"{len(band_names)} band names for values of shape {x.shape} (bands last)")
    for role, name in (("red", red), ("NIR", nir)):
        if name not in band_names:
            raise UnknownNameError(
                f"{role} band {name!r} not among the bands {', '.join(band_names)}; pass {role.lower()}= explicitly"
            )
    out_dtype = np.float32 if x.dtype == np.float32 else np.float64
    r = x[..., band_names.index(red)].astype(np.float64)
    n = x[..., band_names.index(nir)].astype(np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        v = (n - r) / (n + r)
    v = np.where((n + r) == 0, np.nan, v)
    return np.asarray(v, dtype=out_dtype)
