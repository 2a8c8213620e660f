"""Cross-sensor band adjustment of a lazy record that switches sensor (see :mod:`unmix.sensors.adjustments`)."""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..errors import InputError
from ..sensors.adjustments import adjustment_for

__all__ = ["adjust_to_oli"]


def adjust_to_oli(cube: xr.DataArray) -> xr.DataArray:
    """Each date's reflectance adjusted to Landsat 8 OLI with the published transformation of its sensor.

    Parameters
    ----------
    cube : (time, band, y, x) xarray.DataArray
        Reflectance with band roles as ``band`` (blue, green, red, nir, swir1, swir2) and a ``sensor``
        coordinate on ``time`` (as :func:`unmix.io.archive.open_archive` gives).

    Returns
    -------
    xarray.DataArray
        Lazy adjusted reflectance; ``sensor`` now names the sensor whose endmembers fit each date
        (``landsat-8-oli`` for adjusted dates), ``observed_sensor`` the one that observed it; the
        ``band_adjustments`` attribute cites the coefficients used.

    Examples
    --------
    >>> cube = xr.DataArray(np.full((1, 6, 1, 1), 0.1, np.float32), dims=("time", "band", "y", "x"),
    ...                     coords={"band": ["blue", "green", "red", "nir", "swir1", "swir2"],
    ...                             "sensor": ("time", ["landsat-7-etm"])})
    >>> out = adjust_to_oli(cube)
    >>> str(out.sensor.values[0]), round(float(out.values[0, 0, 0, 0]), 4)
    ('landsat-8-oli', 0.085)
    """
    if "sensor" not in cube.coords:
        raise InputError("band adjustment needs the sensor of every date (a 'sensor' coordinate on time); it applies "
                         "to archives of delivered products")
    roles = [str(b) for b in cube["band"].values]
    observed = [str(s) for s in cube["sensor"].values]
    slopes = np.ones((len(observed), len(roles)), np.float32)
    offsets = np.zeros((len(observed), len(roles)), np.float32)
    fitted, refs = [], []
    for i, sensor in enumerate(observed):
        adj = adjustment_for(sensor)
        if adj is None:
            fitted.append(sensor)
            continue
        s, o = adj.coefficients(roles)
        slopes[i], offsets[i] = s, o
        fitted.append(adj.target)
        if adj.reference not in refs:
            refs.append(adj.reference)
    out = cube * xr.DataArray(slopes, dims=("time", "band")) + xr.DataArray(offsets, dims=("time", "band"))
    out = out.astype(np.float32).assign_coords(sensor=("time", np.array(fitted)),
                                               observed_sensor=("time", np.array(observed)))
    out.attrs = {**cube.attrs, "band_adjustments": "; ".join(refs) or "none needed"}
    out.name = cube.name
    return out.transpose(*cube.dims)
