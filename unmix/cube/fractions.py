"""Endmember fractions over a lazy (time, band, y, x) reflectance cube.

The per-pixel solver :func:`unmix.solvers.estimate_fractions` is mapped over the cube with
:func:`xarray.apply_ufunc` (``dask="parallelized"``, band as the core dimension): one task per dask
chunk, which solves the chunk and also marks the pixels with valid fractions for ``valid_count``.
Moving the band axis last is a view, and chunks read from GeoTIFFs are views of band-last buffers,
so no chunk is copied on its way to the solver. Nothing is computed here: the result stays lazy until
a writer (:func:`unmix.io.products.write_netcdf`) or ``.compute()`` runs it, chunk by chunk. No paths
are opened and nothing is printed.
"""

from __future__ import annotations

import threading
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numba
import numpy as np
import xarray as xr

from ..errors import BandMismatchError, InputError, ShapeError
from ..solvers import Constraint, check_endmembers, estimate_fractions
from .georef import georef_attrs
from .plausible import DEFAULT_VALID_RANGE, check_valid_range, implausible_counts, screen_block

__all__ = ["unmix_cube"]

_REFERENCES = (
    "Heinz & Chang (2001) IEEE TGRS 39(3):529-545, doi:10.1109/36.911111; "
    "Keshava & Mustard (2002) IEEE Signal Processing Magazine 19(1):44-57, doi:10.1109/79.974727"
)


def _unmix_block(block: np.ndarray, endmembers: np.ndarray, constraint: str, weights: Any, names: tuple) -> tuple:
    """Kernel call on one chunk: (..., band) float32 -> ((..., endmember), (...)) float32."""
    from ..errors import CollinearityWarning

    # Inside a dask worker thread the scheduler already runs one task per core: a single numba
    # thread per task avoids oversubscribing the cores (numba's setting is per thread).
    in_pool = threading.current_thread() is not threading.main_thread()
    previous = numba.get_num_threads() if in_pool else None
    if in_pool:
        numba.set_num_threads(1)
    try:
        # The endmembers were checked (and any collinearity warning issued) once when the graph
        # was built; do not repeat the warning for every chunk.
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", CollinearityWarning)
            fractions, rmse = estimate_fractions(
                np.asarray(block, dtype=np.float32), endmembers, constraint=constraint, weights=weights, names=names
            )
    finally:
        if previous is not None:
            numba.set_num_threads(previous)
    return fractions.astype(np.float32, copy=False), rmse.astype(np.float32, copy=False)


def reflectance_cube(cube: Any, caller: str) -> xr.DataArray:
    """``cube`` as a (time, band, y, x) DataArray, or InputError / ShapeError naming ``caller``."""
    if not isinstance(cube, xr.DataArray):
        raise InputError(f"{caller} needs an xarray.DataArray, got {type(cube).__name__}")
    missing = [d for d in ("time", "band", "y", "x") if d not in cube.dims]
    if missing:
        raise ShapeError(f"the cube needs dims (time, band, y, x); missing {missing}, has {cube.dims}")
    return cube.transpose("time", "band", "y", "x")


def unmix_cube(
    cube: xr.DataArray,
    endmembers: Any,
    *,
    names: Sequence[str],
    constraint: Constraint | str = "fcls",
    weights: Any = None,
    valid_range: tuple[float, float] | None = DEFAULT_VALID_RANGE,
) -> xr.Dataset:
    """Fractions of every endmember in every pixel and date of a reflectance cube (lazy).

    Linear spectral mixture model per pixel, solved by :func:`unmix.solvers.estimate_fractions`
    (fully constrained least squares by default: fractions non-negative and summing to one).

    Parameters
    ----------
    cube : (time, band, y, x) xarray.DataArray
        Reflectance [unitless, 0-1], float32, usually dask-backed (see
        :func:`unmix.io.stack.open_stack`). NaN = no data; a pixel with a NaN band gets NaN
        fractions and RMSE on that date.
    endmembers : (endmember, band) array_like or xarray.DataArray, or mapping of str to those
        Endmember spectra [reflectance] in the cube's band order; a DataArray with a ``band``
        coordinate is matched to the cube's bands by name. A mapping gives the spectra of each
        sensor (keys: the values of the cube's ``sensor`` coordinate on ``time``): each date is
        unmixed with the endmembers resampled to the sensor that observed it.
    names : sequence of str
        One name per endmember (the ``endmember`` coordinate).
    constraint : Constraint or str, default "fcls"
        ``"none"``, ``"sum-to-one"``, ``"non-negative"`` or ``"fcls"``.
    weights : (band,) array_like, optional
        Per-band weights of the least squares [1/reflectance**2].
    valid_range : (low, high) or None, default (-0.5, 2.0)
        Plausible reflectance [reflectance]: a pixel with a band outside it is no data on that
        date (all its fractions NaN) and is counted in ``implausible_count`` (see
        :mod:`unmix.cube.plausible`). None screens nothing.

    Returns
    -------
    xarray.Dataset
        ``fractions`` (time, endmember, y, x) float32 [1]; ``rmse`` (time, y, x) float32
        [reflectance]; ``valid_count`` (y, x) int32, dates with valid fractions;
        ``implausible_count`` (time,) int32, pixels masked for implausible reflectance;
        ``endmember_spectra`` (endmember, band) float32 [reflectance]. Coordinates and the
        georeferencing (``spatial_ref``, ``crs_wkt``, ``transform``) of ``cube`` are kept;
        attributes record method, constraint and endmember names. All lazy if ``cube`` is.

    Raises
    ------
    BandMismatchError
        Endmember band count or names do not match the cube's bands.
    RankError
        More endmembers than the bands can separate under ``constraint``.

    References
    ----------
    Heinz, D. C. & Chang, C.-I. (2001). Fully constrained least squares linear spectral mixture
    analysis method for material quantification in hyperspectral imagery. IEEE Transactions on
    Geoscience and Remote Sensing 39(3), 529-545. https://doi.org/10.1109/36.911111

    Keshava, N. & Mustard, J. F. (2002). Spectral unmixing. IEEE Signal Processing Magazine 19(1),
    44-57. https://doi.org/10.1109/79.974727

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> M = np.array([[0.04, 0.08, 0.05, 0.45], [0.12, 0.16, 0.22, 0.28]])
    >>> x = (np.array([0.7, 0.3]) @ M).astype("float32")
    >>> cube = xr.DataArray(np.broadcast_to(x[None, :, None, None], (2, 4, 3, 3)).copy(),
    ...                     dims=("time", "band", "y", "x")).chunk({"time": 1})
    >>> ds = unmix_cube(cube, M, names=["gv", "soil"])
    >>> round(float(ds.fractions.sel(endmember="gv").values[0, 0, 0]), 4)
    0.7
    """
    cube = reflectance_cube(cube, "unmix_cube")
    names = tuple(str(n) for n in names)
    if isinstance(endmembers, Mapping):
        return _unmix_by_sensor(cube, endmembers, names=names, constraint=constraint, weights=weights,
                                valid_range=valid_range)
    band_labels = [str(b) for b in cube["band"].values] if "band" in cube.coords else None

    if isinstance(endmembers, xr.DataArray):
        if "band" in endmembers.dims and band_labels is not None and "band" in endmembers.coords:
            em_bands = [str(b) for b in endmembers["band"].values]
            lacking = [b for b in band_labels if b not in em_bands]
            if lacking:
                raise BandMismatchError(
                    f"the endmembers lack the cube's bands {', '.join(lacking)} (endmember bands: {', '.join(em_bands)})"
                )
            endmembers = endmembers.sel(band=band_labels)
        endmembers = endmembers.transpose(..., "band").values if "band" in endmembers.dims else endmembers.values
    con = Constraint(constraint) if not isinstance(constraint, Constraint) else constraint
    n_bands = cube.sizes["band"]
    M = check_endmembers(endmembers, constraint=con, n_bands=n_bands, names=names, weights=weights)
    if len(names) != M.shape[0]:
        raise ShapeError(f"{len(names)} endmember names given for {M.shape[0]} endmember spectra")
    w = None if weights is None else np.asarray(weights, dtype=np.float64)
    vrange = check_valid_range(valid_range)

    if cube.dtype != np.float32:
        cube = cube.astype(np.float32)
    if cube.chunks is not None and len(cube.chunks[1]) > 1:
        cube = cube.chunk({"band": -1})

    # One task per chunk: the kernel, and the valid-pixel mask made from its result while it is in
    # cache. apply_ufunc moves the core dim (band) last as a view; chunks read from GeoTIFFs are
    # views of band-last buffers, so the kernel receives them without a copy.
    fractions, rmse, valid, flags = xr.apply_ufunc(
        _unmix_with_valid,
        cube,
        kwargs={"endmembers": M, "constraint": con.value, "weights": w, "names": names, "valid_range": vrange},
        input_core_dims=[["band"]],
        output_core_dims=[["endmember"], [], [], []],
        dask="parallelized",
        output_dtypes=[np.float32, np.float32, np.bool_, np.bool_],
        dask_gufunc_kwargs={"output_sizes": {"endmember": len(names)}},
        keep_attrs=False,
    )
    fractions = fractions.transpose("time", "endmember", "y", "x").assign_coords(endmember=list(names))
    rmse = rmse.transpose("time", "y", "x")
    valid = valid.transpose("time", "y", "x")
    implausible = implausible_counts(flags.transpose("time", "y", "x"), vrange)
    if valid.chunks is None:
        counts = valid.sum("time", dtype=np.int32)
    else:
        # Small partial sums combined pairwise: the default tree reduction keeps up to 16 int64
        # partial maps per spatial chunk alive, which made memory grow with the number of dates.
        import dask.array as dsa

        data = dsa.sum(valid.data.astype(np.int16), axis=0, dtype=np.int16, split_every=2).astype(np.int32)
        counts = xr.DataArray(data, dims=("y", "x"), coords={k: v for k, v in valid.coords.items()
                                                            if "time" not in v.dims})
    ds = _finish(cube, fractions, rmse, counts, M, con, w, names, band_labels)
    ds["implausible_count"] = implausible
    return ds


def _unmix_by_sensor(cube: xr.DataArray, endmembers: Mapping[str, Any], **kwargs: Any) -> xr.Dataset:
    """unmix_cube of a record that switches sensor: each sensor's dates with that sensor's endmembers."""
    if "sensor" not in cube.coords or cube["sensor"].dims != ("time",):
        raise InputError("endmembers per sensor need a 'sensor' coordinate on the cube's time axis (as "
                         "unmix.io.archive.open_archive gives); pass one endmember array for a one-sensor stack")
    sensors = [str(v) for v in cube["sensor"].values]
    missing = sorted(set(sensors) - {str(k) for k in endmembers})
    if missing:
        raise BandMismatchError(f"no endmember spectra for sensor(s) {', '.join(missing)} of the stack; resample "
                                "the library to every sensor of the record")
    parts, order = [], []
    for sensor in dict.fromkeys(sensors):
        idx = [i for i, s in enumerate(sensors) if s == sensor]
        order += idx
        parts.append(unmix_cube(cube.isel(time=idx), endmembers[sensor], **kwargs))
    per_time = ["fractions", "rmse", "implausible_count"]
    ds = xr.concat([p[per_time] for p in parts], dim="time", combine_attrs="override", coords="minimal",
                   compat="override")
    ds = ds.isel(time=np.argsort(order, kind="stable"))
    ds["valid_count"] = sum(p["valid_count"] for p in parts).astype(np.int32).assign_attrs(
        parts[0]["valid_count"].attrs)
    ds["endmember_spectra"] = xr.concat([p["endmember_spectra"] for p in parts],
                                        dim=xr.DataArray(list(dict.fromkeys(sensors)), dims="sensor_id",
                                                         name="sensor_id"))
    ds.attrs = {**parts[0].attrs, "sensors": ", ".join(dict.fromkeys(sensors))}
    return ds


def _unmix_with_valid(block: np.ndarray, endmembers: np.ndarray, constraint: str, weights: Any,
                      names: tuple, valid_range: tuple[float, float] | None) -> tuple:
    """(..., band) reflectance -> fractions (..., endmember), RMSE (...), valid (...) and implausible (...)
    of one chunk."""
    block, flags = screen_block(np.asarray(block), valid_range)
    fractions, rmse = _unmix_block(block, endmembers, constraint, weights, names)
    return fractions, rmse, _all_finite(fractions), flags


@numba.njit(cache=True, nogil=True)
def _all_finite_2d(values: np.ndarray, out: np.ndarray) -> None:  # pragma: no cover - compiled
    for i in range(values.shape[0]):
        ok = True
        for j in range(values.shape[1]):
            ok &= np.isfinite(values[i, j])
        out[i] = ok


def _all_finite(fractions: np.ndarray) -> np.ndarray:
    """True where every endmember fraction of a pixel is finite: (..., endmember) -> (...) bool."""
    out = np.empty(fractions.shape[:-1], dtype=np.bool_)
    if fractions.flags.c_contiguous and fractions.size:
        _all_finite_2d(fractions.reshape(-1, fractions.shape[-1]), out.reshape(-1))
    else:
        out[...] = np.isfinite(fractions).all(axis=-1)
    return out


def _finish(cube: xr.DataArray, fractions: xr.DataArray, rmse: xr.DataArray, valid_count: xr.DataArray,
            M: np.ndarray, con: Constraint, w: Any, names: tuple, band_labels: Any) -> xr.Dataset:
    """Attributes, spectra and georeferencing around the computed (lazy) variables."""
    fractions.attrs = {"long_name": "endmember fraction (share of the pixel)", "units": "1",
                       "valid_min": 0.0, "valid_max": 1.0} if con is Constraint.FCLS else \
        {"long_name": "endmember fraction (share of the pixel)", "units": "1"}
    rmse.attrs = {"long_name": "root mean square residual of the mixture model", "units": "1"}
    valid_count.attrs = {"long_name": "number of dates with valid fractions", "units": "1"}
    spectra = xr.DataArray(
        M.astype(np.float32),
        dims=("endmember", "band"),
        coords={"endmember": list(names), **({"band": band_labels} if band_labels is not None else {})},
        attrs={"long_name": "endmember reflectance spectra used", "units": "1"},
    )
    # the cube's CRS and transform, wherever it keeps them (grid-mapping coordinate or attributes), as
    # attributes of every gridded variable; the grid-mapping coordinate itself is carried with its attributes
    georef = georef_attrs(cube)
    for da_ in (fractions, rmse, valid_count):
        da_.attrs.update(georef)

    ds = xr.Dataset({"fractions": fractions, "rmse": rmse, "valid_count": valid_count, "endmember_spectra": spectra})
    if "spatial_ref" in cube.coords:
        ds = ds.assign_coords(spatial_ref=cube.coords["spatial_ref"])
    ds.attrs = {
        "method": "linear spectral unmixing by least squares"
        + (" (fully constrained: non-negative, sum to one)" if con is Constraint.FCLS else f" ({con.value})"),
        "constraint": con.value,
        "endmember_names": ", ".join(names),
        "references": _REFERENCES,
        **georef,
    }
    if w is not None:
        ds.attrs["band_weights"] = w
    for key in ("sensor", "input_files"):
        if key in cube.attrs:
            ds.attrs[key] = cube.attrs[key]
    return ds

