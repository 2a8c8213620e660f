"""NetCDF cubes: a variable on dims (time, band, y, x) opened as a lazy reflectance cube."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ...errors import BandMismatchError, InputError, StackReadError, UnknownNameError
from .._guarded_read import guarded_dataset as _guarded
from ..products import grid_mapping_attrs, xy_attrs
from .bands import _as_per_band
from .chunks import _spatial_chunks


def _open_netcdf_stack(
    path: Path, *, sensor: Any, band_names: Any, scale: Any, offset: Any, qa: Any, qa_bits: tuple, chunks: Any
) -> xr.DataArray:
    from ...cube.georef import georef_of

    override = scale is not None or offset is not None
    try:
        ds = xr.open_dataset(path, engine="netcdf4", chunks=None, decode_coords="all", mask_and_scale=not override)
        ds = _guarded(ds, path)
    except Exception as exc:
        raise StackReadError(f"cannot open {path} as NetCDF ({exc}); the file may be truncated or not NetCDF") from None
    candidates = [n for n, v in ds.data_vars.items() if set(v.dims) == {"time", "band", "y", "x"}]
    if not candidates:
        raise InputError(
            f"{path} has no variable on dims (time, band, y, x); variables: "
            + ", ".join(f"{n}{tuple(v.dims)}" for n, v in ds.data_vars.items())
        )
    var_name = "reflectance" if "reflectance" in candidates else candidates[0]
    cube = ds[var_name].transpose("time", "band", "y", "x")
    if override:
        fill = cube.attrs.get("_FillValue", cube.encoding.get("_FillValue", cube.attrs.get("missing_value")))
        raw = cube
        cube = raw.astype("float32")
        if fill is not None:
            cube = cube.where(raw != fill)
    cube = cube.astype("float32")

    n = cube.sizes["band"]
    file_names = [str(v) for v in cube["band"].values] if "band" in cube.coords else None
    qa_da = None
    if qa is not None:
        qa_name = str(qa)
        if qa_name in ds.data_vars and set(ds[qa_name].dims) == {"time", "y", "x"}:
            qa_da = ds[qa_name].transpose("time", "y", "x")
        elif file_names is not None and qa_name in file_names:
            qa_da = ds[var_name].sel(band=qa_name)
            cube = cube.sel(band=[b for b in file_names if b != qa_name])
            file_names = [b for b in file_names if b != qa_name]
            n -= 1
        else:
            raise UnknownNameError(
                f"QA {qa_name!r} is neither a variable on (time, y, x) nor a band of {path}; "
                f"bands: {', '.join(file_names or [])}; variables: {', '.join(map(str, ds.data_vars))}"
            )
    if band_names is not None:
        names = [str(b) for b in band_names]
        if len(names) != n:
            raise BandMismatchError(
                f"{len(names)} band names given but {path} holds {n} bands in {var_name!r}; list one name per band"
            )
    elif file_names is not None and not all(b.isdigit() for b in file_names):
        names = file_names
    elif sensor is not None and len(getattr(sensor, "band_names", ())) == n:
        names = list(sensor.band_names)
    elif sensor is not None:
        raise BandMismatchError(
            f"{path} holds {n} bands but sensor {sensor.id} has {len(sensor.band_names)}; give band_names (--band-names)"
        )
    else:
        names = [f"band_{i}" for i in range(1, n + 1)]
    cube = cube.assign_coords(band=np.array(names).astype(str))
    if override:
        s = _as_per_band(1.0 if scale is None else scale, n, "scale", path)
        o = _as_per_band(0.0 if offset is None else offset, n, "offset", path)
        cube = cube * xr.DataArray(np.float32(s), dims="band") + xr.DataArray(np.float32(o), dims="band")
    if qa_da is not None:
        mask = sum(1 << b for b in qa_bits)
        q = qa_da.fillna(0).astype("int64") if qa_da.dtype.kind == "f" else qa_da.astype("int64")
        bad = ((q & mask) != 0) if mask else (q != 0)
        bad = bad | qa_da.isnull() if qa_da.dtype.kind == "f" else bad
        cube = cube.where(~bad)
    cube = cube.astype("float32")
    if not np.issubdtype(cube["time"].dtype, np.datetime64):
        raise InputError(f"the time coordinate of {path} is not a date; store it with CF units 'days since ...'")
    cube = cube.sortby("time")
    wkt, transform = georef_of(ds)
    height, width = cube.sizes["y"], cube.sizes["x"]
    enc = ds[var_name].encoding.get("chunksizes")
    block = (enc[list(ds[var_name].dims).index("y")], enc[list(ds[var_name].dims).index("x")]) if enc else (height, width)
    ychunks, xchunks = _spatial_chunks(height, width, block, chunks)
    cube = cube.chunk({"time": 1, "band": -1, "y": ychunks, "x": xchunks})
    coords = {"spatial_ref": ((), np.int32(0), grid_mapping_attrs(wkt, transform))}
    cube = cube.assign_coords(coords)
    x_attrs, y_attrs = xy_attrs(wkt)
    cube["x"].attrs = {**x_attrs, **cube["x"].attrs}
    cube["y"].attrs = {**y_attrs, **cube["y"].attrs}
    cube.name = "reflectance"
    cube.attrs = {
        "long_name": "surface reflectance",
        "units": "1",
        "crs_wkt": wkt or "",
        "transform": tuple(transform) if transform is not None else None,
        "grid_mapping": "spatial_ref",
        "input_files": (str(path),),
    }
    if cube.attrs["transform"] is None:
        del cube.attrs["transform"]
    if sensor is not None:
        cube.attrs["sensor"] = str(getattr(sensor, "id", sensor))
    return cube
