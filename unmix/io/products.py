"""Writing and reading products: CF-1.8 NetCDF4 and Cloud-Optimized GeoTIFF, written atomically.

Every product is first written under a hidden temporary name in its destination folder and renamed
into place only when complete, so a reader never sees half a file, an existing product is never
touched without ``overwrite=True`` (:class:`~unmix.errors.OutputExistsError`), and a failure leaves no
partial file behind. Lazy (dask) datasets are computed chunk by chunk while they are written, so
memory is bounded by the chunk size, not the product size.

Georeferencing follows CF and is readable by GDAL and rioxarray: a scalar ``spatial_ref``
grid-mapping variable carries ``crs_wkt`` and ``spatial_ref`` (WKT) plus ``GeoTransform``; every
gridded variable names it in its ``grid_mapping`` attribute; ``x``/``y`` carry ``standard_name`` and
``units``; ``time`` is stored as "days since 1970-01-01".

Provenance lives in global attributes: ``unmix_version``, ``command``, ``parameters`` (JSON),
``endmember_names``, ``input_files``, ``created`` (ISO 8601, UTC), ``history`` and a ``caution``.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import json
import os
import uuid
from collections.abc import Callable, Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from .. import __version__
from ..errors import InputError, OutputExistsError, StackReadError
from ..cube.georef import georef_of
from ._chunked_writer import define_and_plan, release

__all__ = [
    "CAUTION",
    "write_netcdf",
    "open_product",
    "write_cog",
    "provenance_attrs",
    "grid_mapping_attrs",
    "xy_attrs",
    "atomic_path",
]

CAUTION = (
    "Fractions are model estimates; validate in the field before they inform land-management "
    "decisions; defer to local regulations and licensed practice."
)

#: Largest NetCDF chunk along y and x [pixels].
_MAX_SPATIAL_CHUNK = 512


# --------------------------------------------------------------------------------------------------
# georeferencing helpers (also used by unmix.io.stack)


def grid_mapping_attrs(crs: Any, transform: Any) -> dict[str, Any]:
    """Attributes of a CF grid-mapping variable that GDAL and rioxarray both understand.

    Parameters
    ----------
    crs : rasterio.crs.CRS, str (WKT, ``EPSG:xxxx``) or None
    transform : affine.Affine or sequence of 6 floats (a, b, c, d, e, f) or None

    Returns
    -------
    dict
        ``crs_wkt`` and ``spatial_ref`` (the same WKT), ``GeoTransform`` (GDAL order
        ``c a b f d e`` as a space-separated string) and, when pyproj is importable, the CF
        grid-mapping parameters (``grid_mapping_name``...).

    Examples
    --------
    >>> from affine import Affine
    >>> attrs = grid_mapping_attrs("EPSG:32633", Affine(30, 0, 500000, 0, -30, 4000000))
    >>> attrs["GeoTransform"]
    '500000.0 30.0 0.0 4000000.0 0.0 -30.0'
    """
    attrs: dict[str, Any] = {}
    if crs is not None and str(crs) != "":
        from rasterio.crs import CRS

        crs_obj = crs if isinstance(crs, CRS) else CRS.from_user_input(crs)
        wkt = crs_obj.to_wkt()
        try:  # CF parameters are a courtesy for CF tools; WKT is what GDAL/rioxarray read.
            import pyproj

            cf = pyproj.CRS.from_wkt(wkt).to_cf()
            for key, value in cf.items():
                if key not in ("crs_wkt",) and isinstance(value, (str, int, float, np.number)):
                    attrs[key] = value
        except Exception:  # pragma: no cover - pyproj missing or CRS without CF form
            pass
        attrs["crs_wkt"] = wkt
        attrs["spatial_ref"] = wkt
    if transform is not None:
        t = tuple(float(v) for v in tuple(transform)[:6])
        a, b, c, d, e, f = t
        attrs["GeoTransform"] = " ".join(repr(v) for v in (c, a, b, f, d, e))
    return attrs


def xy_attrs(crs: Any) -> tuple[dict[str, str], dict[str, str]]:
    """CF attributes for the ``x`` and ``y`` coordinates of a grid in ``crs``.

    Returns
    -------
    (x_attrs, y_attrs) : tuple of dict
        ``projection_x_coordinate`` / ``projection_y_coordinate`` in the CRS's linear unit for a
        projected CRS, ``longitude`` / ``latitude`` in degrees for a geographic one.
    """
    if crs is None or str(crs) == "":
        return ({"long_name": "x coordinate of pixel centre"}, {"long_name": "y coordinate of pixel centre"})
    from rasterio.crs import CRS

    crs_obj = crs if isinstance(crs, CRS) else CRS.from_user_input(crs)
    if crs_obj.is_geographic:
        return (
            {"standard_name": "longitude", "long_name": "longitude of pixel centre", "units": "degrees_east", "axis": "X"},
            {"standard_name": "latitude", "long_name": "latitude of pixel centre", "units": "degrees_north", "axis": "Y"},
        )
    unit = "m"
    try:
        factors = crs_obj.linear_units_factor
        if factors and abs(float(factors[1]) - 1.0) > 1e-12:
            unit = str(factors[0])
    except Exception:  # pragma: no cover - some CRSs have no linear unit
        pass
    return (
        {"standard_name": "projection_x_coordinate", "long_name": "x coordinate of pixel centre", "units": unit, "axis": "X"},
        {"standard_name": "projection_y_coordinate", "long_name": "y coordinate of pixel centre", "units": unit, "axis": "Y"},
    )


# --------------------------------------------------------------------------------------------------
# atomic writing


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, *, overwrite: bool = False) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it to ``path`` when the block succeeds.

    Raises :class:`~unmix.errors.OutputExistsError` at once if ``path`` exists and ``overwrite`` is
    false. On any exception the temporary file is removed and ``path`` is left as it was.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> target = pathlib.Path(tempfile.mkdtemp()) / "out.txt"
    >>> with atomic_path(target) as tmp:
    ...     _ = tmp.write_text("done")
    >>> target.read_text()
    'done'
    """
    path = Path(path)
    if path.exists() and not overwrite:
        raise OutputExistsError(f"{path} exists already; pass overwrite=True (--overwrite) to replace it")
    if path.exists() and path.is_dir():
        raise OutputExistsError(f"{path} is a folder; choose a file name for the product")
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.parent / f".{path.name}.{uuid.uuid4().hex[:12]}.partial"
    try:
        yield tmp
        if not tmp.exists():
            raise OSError(f"nothing was written to the temporary file for {path}")
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise


# --------------------------------------------------------------------------------------------------
# provenance


def _attr_value(value: Any) -> Any:
    """Turn a Python value into something a NetCDF attribute can hold (None -> dropped)."""
    if value is None:
        return None
    if isinstance(value, bool | np.bool_):
        return int(value)
    if isinstance(value, str | int | float | np.number):
        return value
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, Mapping):
        return json.dumps(value, default=str, sort_keys=True)
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "iuf":
            return value
        return ", ".join(str(v) for v in value.ravel())
    if isinstance(value, Sequence):
        items = list(value)
        if items and all(isinstance(v, int | float | np.number) and not isinstance(v, bool) for v in items):
            return np.asarray(items)
        return ", ".join(str(v) for v in items)
    return str(value)


def _clean_attrs(attrs: Mapping[str, Any]) -> dict[str, Any]:
    out = {}
    for key, value in attrs.items():
        cleaned = _attr_value(value)
        if cleaned is not None:
            out[str(key)] = cleaned
    return out


def provenance_attrs(
    *,
    command: str | None = None,
    parameters: Mapping[str, Any] | None = None,
    input_files: Sequence[str | os.PathLike] | None = None,
    endmember_names: Sequence[str] | None = None,
    title: str | None = None,
) -> dict[str, Any]:
    """Global attributes every unmix product carries.

    Parameters
    ----------
    command : str, optional
        The command line or function call that made the product.
    parameters : mapping, optional
        Settings of the run; stored as JSON.
    input_files : sequence of path, optional
        Files read; stored comma-separated.
    endmember_names : sequence of str, optional
    title : str, optional

    Returns
    -------
    dict
        ``Conventions``, ``title``, ``unmix_version``, ``command``, ``parameters``,
        ``endmember_names``, ``input_files``, ``created``, ``history``, ``caution``.

    Examples
    --------
    >>> attrs = provenance_attrs(command="unmix fractions stack/", parameters={"constraint": "fcls"})
    >>> attrs["parameters"]
    '{"constraint": "fcls"}'
    """
    created = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")
    command = command or "unmix (Python API)"
    attrs: dict[str, Any] = {
        "Conventions": "CF-1.8",
        "title": title or "unmix product",
        "unmix_version": __version__,
        "command": command,
        "parameters": json.dumps(dict(parameters or {}), default=str, sort_keys=True),
        "created": created,
        "history": f"{created} {command} (unmix {__version__})",
        "caution": CAUTION,
    }
    if endmember_names is not None:
        attrs["endmember_names"] = ", ".join(str(n) for n in endmember_names)
    if input_files is not None:
        attrs["input_files"] = ", ".join(str(p) for p in input_files)
    return attrs


# --------------------------------------------------------------------------------------------------
# NetCDF


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
        :class:`~unmix.errors.OutputExistsError` before any work and is left untouched.
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
    **compute_kwargs
        Passed to ``dask.compute`` when ``compute`` is not given (e.g. ``scheduler="threads"``).

    Returns
    -------
    pathlib.Path
        The written file.

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
    if path.exists() and not overwrite:
        raise OutputExistsError(f"{path} exists already; pass overwrite=True (--overwrite) to replace it")
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
    with atomic_path(path, overwrite=overwrite) as tmp:
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
        Dask chunks; default: the file's own chunks (``{}``).

    Returns
    -------
    xarray.Dataset
        Lazy dataset; each gridded variable keeps ``crs_wkt`` and ``transform`` attributes.

    Raises
    ------
    StackReadError
        The file is missing or is not a readable NetCDF file.
    """
    path = Path(path)
    if not path.is_file():
        raise StackReadError(f"product {path} not found; check the path (products are written as <out>/fractions.nc)")
    try:
        ds = xr.open_dataset(path, engine="netcdf4", chunks={} if chunks is None else chunks, decode_coords="all")
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


# --------------------------------------------------------------------------------------------------
# Cloud-Optimized GeoTIFF


def _cog_driver_available() -> bool:
    import rasterio

    with rasterio.Env() as env:
        return "COG" in env.drivers()


def write_cog(
    da: xr.DataArray,
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    blocksize: int = 512,
    compress: str = "DEFLATE",
    resampling: str = "average",
    tags: Mapping[str, Any] | None = None,
) -> Path:
    """Write a (time, y, x) or (y, x) array as a float32 Cloud-Optimized GeoTIFF, atomically.

    One band per date, band descriptions = ISO dates (``YYYY-MM-DD``; for another leading
    dimension the coordinate values), nodata NaN, tiled, compressed, with overviews. The array is
    computed block row by block row into a temporary tiled GeoTIFF, which GDAL's ``COG`` driver then
    copies into the final layout (or, on a GDAL without that driver, the tiled GeoTIFF gets internal
    overviews and is kept).

    Parameters
    ----------
    da : (time, y, x) or (y, x) xarray.DataArray
        Georeferenced by a ``spatial_ref`` coordinate or ``crs_wkt`` / ``transform`` attributes (or
        regular ``x``/``y`` coordinates, then without CRS).
    path : path
        Destination ``.tif``.
    overwrite : bool
        Replace an existing file (else :class:`~unmix.errors.OutputExistsError`, file untouched).
    blocksize : int
        Tile size [pixels].
    compress : str
        GDAL compression name.
    resampling : str
        Overview resampling (GDAL name).
    tags : mapping, optional
        Dataset tags (provenance) to store in the file.

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np, xarray as xr
    >>> da = xr.DataArray(np.zeros((1, 4, 4), "float32"), dims=("time", "y", "x"),
    ...                   coords={"time": np.array(["2020-05-01"], "datetime64[ns]"),
    ...                           "y": [3.5, 2.5, 1.5, 0.5], "x": [0.5, 1.5, 2.5, 3.5]})
    >>> out = write_cog(da, pathlib.Path(tempfile.mkdtemp()) / "f.tif")
    """
    import rasterio
    import rasterio.shutil
    from affine import Affine
    from rasterio.enums import Resampling

    path = Path(path)
    if path.exists() and not overwrite:
        raise OutputExistsError(f"{path} exists already; pass overwrite=True (--overwrite) to replace it")
    if da.ndim == 2:
        da = da.expand_dims("band")
    if da.ndim != 3 or da.dims[1:] != ("y", "x"):
        raise InputError(f"write_cog needs dims (time, y, x) or (y, x), got {da.dims}; select one endmember first")
    lead = da.dims[0]
    if lead in da.coords:
        values = da[lead].values
        if np.issubdtype(values.dtype, np.datetime64):
            descriptions = [str(np.datetime_as_string(v, unit="D")) for v in values]
        else:
            descriptions = [str(v) for v in values]
    else:
        descriptions = [f"{lead} {i + 1}" for i in range(da.shape[0])]
    wkt, transform = georef_of(da)
    n, height, width = (int(s) for s in da.shape)
    profile = {
        "driver": "GTiff",
        "width": width,
        "height": height,
        "count": n,
        "dtype": "float32",
        "nodata": float("nan"),
        "tiled": True,
        "blockxsize": blocksize,
        "blockysize": blocksize,
        "compress": compress,
        "predictor": 3,
        "BIGTIFF": "IF_SAFER",
    }
    if wkt is not None:
        profile["crs"] = rasterio.crs.CRS.from_wkt(wkt)
    if transform is not None:
        profile["transform"] = Affine(*transform)
    clean_tags = {k: str(v) for k, v in _clean_attrs(dict(tags or {})).items()}
    use_cog = _cog_driver_available()

    with atomic_path(path, overwrite=overwrite) as tmp:
        stage = tmp.with_name(tmp.name + ".stage.tif") if use_cog else tmp
        try:
            with rasterio.open(stage, "w", **profile) as dst:
                for i, text in enumerate(descriptions, start=1):
                    dst.set_band_description(i, text)
                if clean_tags:
                    dst.update_tags(**clean_tags)
                step = blocksize * max(1, 2048 // blocksize)
                for row in range(0, height, step):
                    rows = slice(row, min(height, row + step))
                    block = np.asarray(da[:, rows, :].values, dtype="float32")
                    dst.write(block, window=rasterio.windows.Window(0, row, width, block.shape[1]))
                if not use_cog:
                    factors = [f for f in (2, 4, 8, 16, 32) if min(height, width) // f >= blocksize // 2]
                    if factors:
                        dst.build_overviews(factors, getattr(Resampling, resampling))
            if use_cog:
                rasterio.shutil.copy(
                    stage,
                    tmp,
                    driver="COG",
                    BLOCKSIZE=blocksize,
                    COMPRESS=compress,
                    PREDICTOR="YES",
                    OVERVIEWS="AUTO",
                    RESAMPLING=resampling.upper(),
                    BIGTIFF="IF_SAFER",
                )
        finally:
            if use_cog:
                with contextlib.suppress(OSError):
                    Path(stage).unlink()
    return path
