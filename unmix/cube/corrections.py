"""Corrections of a lazy cube from the comparability measures: registration and radiometric normalisation.

Both stay lazy (dask): resampling by the measured shift with an overlap between chunks, and the fitted
gain and offset per date and band. See :mod:`unmix.cube.comparability` for the measures.
"""

from __future__ import annotations

import functools
import math

import dask.array as da
import numpy as np
import xarray as xr

from unmix.comparability import shift_image

__all__ = ["correct_registration", "normalise_cube"]


def _shift_chunk(block: np.ndarray, *, dy: np.ndarray, dx: np.ndarray, order: int,
                 block_info=None) -> np.ndarray:
    t0, t1 = block_info[0]["array-location"][0]
    out = np.empty(block.shape, dtype=block.dtype)
    for k, t in enumerate(range(t0, t1)):
        out[k] = shift_image(block[k], float(dy[t]), float(dx[t]), order=order)
    return out


def correct_registration(cube: xr.DataArray, shifts: xr.Dataset, *, order: int = 3) -> xr.DataArray:
    """Resample each date by its measured shift (lazy; chunks overlap by ``ceil(max|shift|) + 2`` pixels for
    linear, ``+ 8`` for cubic interpolation).

    A date whose shift is NaN (not measured) becomes all NaN: it cannot be corrected, so it is not
    passed on as if it were aligned.
    """
    cube = cube.transpose("time", "band", "y", "x")
    dy = shifts["shift_y"].reindex(time=cube["time"]).values.astype(np.float64)
    dx = shifts["shift_x"].reindex(time=cube["time"]).values.astype(np.float64)
    finite = np.concatenate([np.abs(dy[np.isfinite(dy)]), np.abs(dx[np.isfinite(dx)]), [0.0]])
    # halo: the shift plus the interpolation footprint; the cubic spline's prefilter reaches further
    # (its influence decays as 0.268^k), 8 pixels keep chunk seams below 1e-5 of the signal
    depth = int(math.ceil(finite.max())) + (2 if order == 1 else 8)
    data = cube.data if isinstance(cube.data, da.Array) else da.from_array(cube.data, chunks=(1, -1, -1, -1))
    if min(min(data.chunks[2]), min(data.chunks[3])) < depth:  # a halo may not exceed a chunk
        data = data.rechunk({2: max(4 * depth, 256), 3: max(4 * depth, 256)})
    func = functools.partial(_shift_chunk, dy=dy, dx=dx, order=order)
    out = da.map_overlap(func, data, depth={0: 0, 1: 0, 2: depth, 3: depth}, boundary="none",
                         dtype=data.dtype, meta=np.array((), dtype=data.dtype))
    return cube.copy(data=out).assign_attrs(registration_corrected="yes", registration_reference=shifts.attrs.get(
        "reference", ""))


def normalise_cube(cube: xr.DataArray, fits: xr.Dataset) -> xr.DataArray:
    """Apply the fitted gain and offset per date and band (lazy): ``offset + gain * cube``.

    A date or band without a fit (NaN gain or offset: too few invariant pixels, a date alone in its sensor,
    a date not in ``fits``) is left as it is (gain 1, offset 0), never blanked; the ledger says which.
    """
    gain = fits["gain"].reindex(time=cube["time"], band=cube["band"])
    offset = fits["offset"].reindex(time=cube["time"], band=cube["band"])
    fitted = gain.notnull() & offset.notnull()
    gain = gain.where(fitted, 1.0).astype(cube.dtype)
    offset = offset.where(fitted, 0.0).astype(cube.dtype)
    out = (offset + gain * cube).transpose(*cube.dims)
    return out.assign_attrs(cube.attrs, radiometric_normalisation="IR-MAD + orthogonal regression",
                            normalisation_reference=fits.attrs.get("reference", ""))
