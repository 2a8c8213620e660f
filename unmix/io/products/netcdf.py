"""CF-1.8 NetCDF4 products: write a dataset atomically, computing lazy data chunk by chunk, and open one.

Georeferencing follows CF (see :mod:`unmix.io.products`); compressed chunks are shuffled and deflated in
the dask tasks by :mod:`unmix.io._chunked_writer`.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ...cube.georef import georef_of
from ...errors import InputError, StackReadError
from .._chunked_writer import define_and_plan, release
from .._guarded_read import guarded_dataset
from .atomic import atomic_path
from .claim import ProductSet
from .grid_mapping import grid_mapping_attrs, xy_attrs
from .provenance import _clean_attrs, provenance_attrs

__all__ = ["write_netcdf", "open_product"]

_READ_HINT = ("the product was changed, truncated or removed after it was opened, or is damaged: write it again "
              "with the command that made it")

#: Largest NetCDF chunk along y and x [pixels].
_MAX_SPATIAL_CHUNK = 512


def _prepare_dataset(ds: xr.Dataset, complevel: int = 1) -> tuple[xr.Dataset, dict[str, dict[str, Any]]]:
    """A copy of ``ds`` with CF georeferencing and attributes, plus the encoding to write it with."""
    ds = ds.copy(deep=False)
    for var in ds.variables.values():
        var.encoding = {}
    wkt, transform = georef_of(ds)
    gridded = [name for name, v in ds.data_vars.items() if "y" in v.dims and "x" in v.dims]
    if wkt is not None or transform is not None:
        ds = ds.assign_coords(spatial_ref=xr.Variable((), np.int32(0), grid_mapping_attrs(wkt, transform)))
    for name in ds.data_vars:
        attrs = {k: v for k, v in ds[name].attrs.items() if k not in ("crs_wkt", "transform", "grid_mapping")}
        if name in gridded and "spatial_ref" in ds.coords:
            attrs["grid_mapping"] = "spatial_ref"
        ds[name].attrs = _clean_attrs(attrs)
    x_attrs, y_attrs = xy_attrs(wkt)
    if "x" in ds.coords:
        ds["x"].attrs = {**x_attrs, **_clean_attrs(ds["x"].attrs)}
    if "y" in ds.coords:
        ds["y"].attrs = {**y_attrs, **_clean_attrs(ds["y"].attrs)}
    if "time" in ds.coords:
        ds["time"].attrs = {"standard_name": "time", "long_name": "acquisition date", "axis": "T",
                            **{k: v for k, v in ds["time"].attrs.items() if k not in ("units", "calendar")}}
    for name in ("endmember", "band"):
        if name in ds.coords and ds[name].dtype.kind in "OUS":
            ds[name] = ds[name].astype(str)
    ds.attrs = _clean_attrs({k: v for k, v in ds.attrs.items() if k not in ("crs_wkt", "transform", "source_file")})

    encoding: dict[str, dict[str, Any]] = {}
    for name, var in ds.data_vars.items():
        enc: dict[str, Any] = {}
        kind = var.dtype.kind
        if kind == "f":
            enc.update(dtype="float32", _FillValue=np.float32(np.nan))
        elif kind in "iu":
            enc.update(_FillValue=None)
        elif kind == "b":
            enc.update(dtype="int8", _FillValue=None)
        if kind in "fiub" and var.ndim > 0:
            chunks = var.chunks
            sizes = []
            for i, dim in enumerate(var.dims):
                full = var.shape[i]
                first = chunks[i][0] if chunks is not None else full
                if dim in ("y", "x"):
                    sizes.append(max(1, min(first, _MAX_SPATIAL_CHUNK, full)))
                elif var.ndim >= 3:
                    sizes.append(1)
                else:
                    sizes.append(max(1, full))
            enc.update(chunksizes=tuple(sizes))
            if complevel:
                enc.update(zlib=True, complevel=int(complevel), shuffle=True)
        encoding[name] = enc
    if "time" in ds.coords and np.issubdtype(ds["time"].dtype, np.datetime64):
        encoding["time"] = {"units": "days since 1970-01-01 00:00:00", "calendar": "proleptic_gregorian", "dtype": "float64",
                            "_FillValue": None}
    for name in ("x", "y"):
        if name in ds.coords:
            encoding[name] = {"dtype": "float64", "_FillValue": None}
    return ds, encoding


def write_netcdf(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    command: str | None = None,
    parameters: Mapping[str, Any] | None = None,
    input_files: Sequence[str | os.PathLike] | None = None,
    title: str | None = None,
    complevel: int = 1,
    compute: Callable[[Any], Any] | None = None,
    products: ProductSet | None = None,
    **compute_kwargs: Any,
) -> Path:
    """Write a dataset as a CF-1.8 NetCDF4 product, atomically, computing lazy data chunk by chunk.

    Parameters
    ----------
    ds : xarray.Dataset
        Data variables on (time, endmember, y, x) or any subset of dims; floating variables are
        stored as float32 with NaN fill, zlib-compressed and chunked (one date/endmember and at
        most 512 x 512 pixels per NetCDF chunk).
        Georeferencing is taken from a ``spatial_ref`` coordinate (``crs_wkt``, ``GeoTransform``),
        else from ``crs_wkt`` / ``transform`` attributes, else from regular x/y coordinates.
    path : path
        Destination file (``.nc``). Its folder is created if missing.
    overwrite : bool
        Replace an existing file. Without it an existing file raises
        :class:`~unmix.errors.OutputExistsError` before any work and is left untouched (as does a
        concurrent run writing the same path: :class:`~unmix.errors.ProductClaimedError`).
    command, parameters, input_files, title
        Provenance, see :func:`provenance_attrs`. Attributes already on ``ds`` are kept.
    complevel : int, default 1
        zlib level 0-9 (with byte shuffle); 0 writes uncompressed. Full-precision float fractions
        compress poorly (to about 80 % at level 1) and higher levels cost much more time than they
        save space, so the default is the fastest level. Chunks are shuffled and deflated in the
        dask tasks (threads or distributed workers) in parallel and HDF5 only stores the finished
        chunks (see :mod:`unmix.io._chunked_writer`); the file is an ordinary NetCDF4 file.
    compute : callable, optional
        Called with the delayed write to run it (e.g. ``SchedulerContext.compute`` for a cluster and
        a progress bar). Default: ``dask.compute(delayed, **compute_kwargs)``.
    products : ProductSet, optional
        A claimed set of products this file belongs to (:mod:`unmix.io.products.claim`): the file is
        written under a temporary name and appears with the rest of the set at its commit. Default:
        claimed and committed on its own.
    **compute_kwargs
        Passed to ``dask.compute`` when ``compute`` is not given (e.g. ``scheduler="threads"``).

    Returns
    -------
    pathlib.Path
        The written file (with ``products``: its name once the set is committed).

    Raises
    ------
    ProductWriteError
        The folder is not writable, the disk is full or a file size limit was reached; one line
        naming the file, and no file (not even a temporary one) is left.

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np, xarray as xr
    >>> ds = xr.Dataset({"rmse": (("y", "x"), np.zeros((2, 3), "float32"))},
    ...                 coords={"y": [15.0, 5.0], "x": [5.0, 15.0, 25.0]})
    >>> out = write_netcdf(ds, pathlib.Path(tempfile.mkdtemp()) / "p.nc")
    >>> open_product(out)["rmse"].shape
    (2, 3)
    """
    import dask

    path = Path(path)
    if not isinstance(ds, xr.Dataset):
        raise InputError(f"write_netcdf needs an xarray.Dataset, got {type(ds).__name__}; use .to_dataset() first")
    if not 0 <= int(complevel) <= 9:
        raise InputError(f"complevel must be 0 (none) to 9, got {complevel}")
    prepared, encoding = _prepare_dataset(ds, complevel)
    endmember_names = [str(v) for v in prepared["endmember"].values] if "endmember" in prepared.coords else None
    prov = provenance_attrs(
        command=command or ds.attrs.get("command"),
        parameters=parameters if parameters is not None else _json_or_none(ds.attrs.get("parameters")),
        input_files=input_files if input_files is not None else _split_or_none(ds.attrs.get("input_files")),
        endmember_names=endmember_names,
        title=title or ds.attrs.get("title"),
    )
    prepared.attrs = {**prepared.attrs, **prov}
    with atomic_path(path, overwrite=overwrite, products=products) as tmp:
        if int(complevel) == 0:
            # uncompressed: HDF5 only copies bytes, xarray's own writer keeps up
            delayed = prepared.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=encoding, compute=False)
        else:
            # compressed: the dask tasks shuffle + deflate the chunks in parallel, HDF5 only stores them
            delayed = define_and_plan(prepared, tmp, encoding)
        try:
            if compute is not None:
                compute(delayed)
            else:
                dask.compute(delayed, **compute_kwargs)
        finally:
            release(tmp)
    return path


def _json_or_none(value: Any) -> Any:
    if value is None:
        return None
    if isinstance(value, Mapping):
        return value
    try:
        return json.loads(value)
    except (TypeError, ValueError):
        return {"value": str(value)}


def _split_or_none(value: Any) -> list[str] | None:
    if value is None:
        return None
    if isinstance(value, str):
        return [v.strip() for v in value.split(",") if v.strip()]
    return [str(v) for v in value]


def open_product(path: str | os.PathLike, *, chunks: Mapping[str, int] | str | None = None) -> xr.Dataset:
    """Open a NetCDF product lazily (dask arrays), with ``spatial_ref`` decoded as a coordinate.

    Parameters
    ----------
    path : path
        A file written by :func:`write_netcdf` (or any CF NetCDF with the same layout).
    chunks : mapping or None
        Dask chunks per dimension (``-1`` = whole dimension); dimensions not named, and all of them
        by default, keep the file's own chunks. ``"auto"`` lets dask choose.

    Returns
    -------
    xarray.Dataset
        Lazy dataset; each gridded variable keeps ``crs_wkt`` and ``transform`` attributes.

    Raises
    ------
    StackReadError
        The file is missing or is not a readable NetCDF file; or, when a lazy variable is computed
        later, one of its chunks cannot be read (a damaged or truncated file): the message names the
        file, the variable and the chunk.
    """
    path = Path(path)
    if not path.is_file():
        raise StackReadError(f"product {path} not found; check the path (products are written as <out>/fractions.nc)")
    try:
        ds = xr.open_dataset(path, engine="netcdf4", chunks=None, decode_coords="all")
        ds = guarded_dataset(ds, path, chunks, hint=_READ_HINT)
    except Exception as exc:  # netCDF4/HDF5 raise assorted types
        raise StackReadError(f"cannot read product {path}: {exc}; is it a NetCDF file written by unmix?") from None
    wkt, transform = georef_of(ds)
    for name, var in ds.data_vars.items():
        if "y" in var.dims and "x" in var.dims:
            if wkt is not None:
                var.attrs.setdefault("crs_wkt", wkt)
            if transform is not None:
                var.attrs.setdefault("transform", tuple(transform))
    return ds
