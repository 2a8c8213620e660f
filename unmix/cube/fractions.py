"""Endmember fractions over a lazy (time, band, y, x) reflectance cube.

The per-pixel solver :func:`unmix.solvers.estimate_fractions` is mapped over the cube's dask chunks,
one task per chunk, with the band axis moved last as a view (chunks read from GeoTIFFs are views of
band-last buffers, so no chunk is copied on its way to the solver); the same task marks the pixels
with valid fractions for ``valid_count``. In-memory cubes go through :func:`xarray.apply_ufunc` (band
as the core dimension); both paths give identical values. Nothing is computed here:
the result stays lazy until a writer (:func:`unmix.io.products.write_netcdf`) or ``.compute()`` runs
it, chunk by chunk. No paths are opened and nothing is printed.
"""

from __future__ import annotations

import threading
import warnings
from collections.abc import Sequence
from typing import Any

import numba
import numpy as np
import xarray as xr

from ..errors import BandMismatchError, InputError, ShapeError
from ..solvers import Constraint, check_endmembers, estimate_fractions

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


def unmix_cube(
    cube: xr.DataArray,
    endmembers: Any,
    *,
    names: Sequence[str],
    constraint: Constraint | str = "fcls",
    weights: Any = None,
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
    endmembers : (endmember, band) array_like or xarray.DataArray
        Endmember spectra [reflectance] in the cube's band order; a DataArray with a ``band``
        coordinate is matched to the cube's bands by name.
    names : sequence of str
        One name per endmember (the ``endmember`` coordinate).
    constraint : Constraint or str, default "fcls"
        ``"none"``, ``"sum-to-one"``, ``"non-negative"`` or ``"fcls"``.
    weights : (band,) array_like, optional
        Per-band weights of the least squares [1/reflectance**2].

    Returns
    -------
    xarray.Dataset
        ``fractions`` (time, endmember, y, x) float32 [1]; ``rmse`` (time, y, x) float32
        [reflectance]; ``valid_count`` (y, x) int32, dates with valid fractions;
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
    if not isinstance(cube, xr.DataArray):
        raise InputError(f"unmix_cube needs an xarray.DataArray, got {type(cube).__name__}")
    missing = [d for d in ("time", "band", "y", "x") if d not in cube.dims]
    if missing:
        raise ShapeError(f"the cube needs dims (time, band, y, x); missing {missing}, has {cube.dims}")
    cube = cube.transpose("time", "band", "y", "x")
    names = tuple(str(n) for n in names)
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

    if cube.dtype != np.float32:
        cube = cube.astype(np.float32)
    if cube.chunks is not None and len(cube.chunks[1]) > 1:
        cube = cube.chunk({"band": -1})

    if cube.chunks is not None:
        return _finish(cube, *_unmix_dask(cube, M, con.value, w, names), M, con, w, names, band_labels)
    fractions, rmse = xr.apply_ufunc(
        _unmix_block,
        cube,
        kwargs={"endmembers": M, "constraint": con.value, "weights": w, "names": names},
        input_core_dims=[["band"]],
        output_core_dims=[["endmember"], []],
        dask="parallelized",
        output_dtypes=[np.float32, np.float32],
        dask_gufunc_kwargs={"output_sizes": {"endmember": len(names)}},
        keep_attrs=False,
    )
    fractions = fractions.transpose("time", "endmember", "y", "x").assign_coords(endmember=list(names))
    valid_count = fractions.notnull().all("endmember").sum("time").astype(np.int32)
    return _finish(cube, fractions, rmse, valid_count, M, con, w, names, band_labels)


def _unmix_chunk(block: np.ndarray, endmembers: np.ndarray, constraint: str, weights: Any, names: tuple) -> tuple:
    """One (time, band, y, x) chunk -> fractions (time, endmember, y, x), RMSE and valid (time, y, x).

    The band axis is moved last as a view: chunks read from GeoTIFFs are views of band-last buffers,
    so the kernel gets them without a copy. Outputs are views of the kernel's band-last results.
    """
    fractions, rmse = _unmix_block(np.moveaxis(block, 1, -1), endmembers, constraint, weights, names)
    valid = np.isfinite(fractions[..., 0])
    for j in range(1, fractions.shape[-1]):
        valid &= np.isfinite(fractions[..., j])
    return np.moveaxis(fractions, -1, 1), rmse, valid


def _unmix_dask(cube: xr.DataArray, M: np.ndarray, constraint: str, w: Any, names: tuple) -> tuple:
    """Lazy fractions, RMSE and valid-date count of a dask-backed (time, band, y, x) cube.

    One task per chunk runs the kernel (fused with the chunk's read by dask's graph optimisation)
    and returns three arrays; three light layers pick them out. Equivalent to ``apply_ufunc`` with
    band as the core dim, without its transposed copy of every chunk.
    """
    import operator

    import dask.array as dsa
    from dask.base import tokenize
    from dask.highlevelgraph import HighLevelGraph

    data = cube.data
    p = len(names)
    token = tokenize(data, M, constraint, w, names)
    name = "unmix-" + token
    both = dsa.blockwise(
        _unmix_chunk, "tbyx", data, "tbyx", name=name, dtype=np.float32,
        meta=np.empty((0, 0, 0, 0), np.float32), endmembers=M, constraint=constraint, weights=w, names=names,
    )  # fmt: skip
    keys = [k for k in both.__dask_keys__() for k in _flatten_keys(k)]
    tc, _, yc, xc = data.chunks

    def pick(index: int, label: str, chunks: tuple, dtype: Any, drop_band: bool) -> Any:
        out_name = f"unmix-{label}-{token}"
        layer = {(out_name, k[1], *(() if drop_band else (0,)), k[3], k[4]): (operator.getitem, k, index)
                 for k in keys}
        graph = HighLevelGraph.from_collections(out_name, layer, dependencies=[both])
        ndim = 3 if drop_band else 4
        return dsa.Array(graph, out_name, chunks, dtype=dtype, meta=np.empty((0,) * ndim, dtype))

    frac = pick(0, "fractions", (tc, (p,), yc, xc), np.float32, False)
    rmse = pick(1, "rmse", (tc, yc, xc), np.float32, True)
    valid = pick(2, "valid", (tc, yc, xc), np.bool_, True)
    coords = {k: v for k, v in cube.coords.items() if "band" not in v.dims}
    fractions = xr.DataArray(frac, dims=("time", "endmember", "y", "x"), coords=coords).assign_coords(
        endmember=list(names))
    rmse_da = xr.DataArray(rmse, dims=("time", "y", "x"), coords=coords)
    # Small partial sums combined pairwise: the default tree reduction keeps up to 16 int64
    # partial maps per spatial chunk alive, which made memory grow with the number of dates.
    counts = dsa.sum(valid.astype(np.int16), axis=0, dtype=np.int16, split_every=2).astype(np.int32)
    valid_count = xr.DataArray(counts, dims=("y", "x"), coords={k: v for k, v in coords.items() if "time" not in v.dims})
    return fractions, rmse_da, valid_count


def _flatten_keys(k: Any) -> list:
    return [x for sub in k for x in _flatten_keys(sub)] if isinstance(k, list) else [k]


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
    georef = {k: cube.attrs[k] for k in ("crs_wkt", "transform") if k in cube.attrs}
    for da_ in (fractions, rmse, valid_count):
        da_.attrs.update(georef)

    ds = xr.Dataset({"fractions": fractions, "rmse": rmse, "valid_count": valid_count, "endmember_spectra": spectra})
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
