"""The public entry point :func:`open_stack` (see the package notes for dates and values)."""

from __future__ import annotations

import enum
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ...errors import BandMismatchError, GridMismatchError, InputError
from ..products import grid_mapping_attrs, xy_attrs
from .bands import _as_per_band, _band_names_for, _find_qa_files, _resolve_qa_band, _resolve_sensor
from .chunks import _dask_from_readers, _spatial_chunks
from .dates import _dates_for
from .files import _is_netcdf, find_stack_files
from .geotiff import _DateReader, _grid_differences, _read_header
from .netcdf import _open_netcdf_stack

__all__ = ["open_stack", "Resampling"]


class Resampling(str, enum.Enum):
    """Resampling used by ``align=True`` when a date is warped onto the reference grid."""

    NEAREST = "nearest"
    BILINEAR = "bilinear"
    CUBIC = "cubic"
    AVERAGE = "average"
    MODE = "mode"

    def __str__(self) -> str:
        return self.value



def open_stack(
    source: str | os.PathLike | Sequence[str | os.PathLike],
    *,
    sensor: Any = None,
    band_names: Sequence[str] | None = None,
    dates: str | os.PathLike | Mapping[str, Any] | Sequence[Any] | None = None,
    scale: float | Sequence[float] | None = None,
    offset: float | Sequence[float] | None = None,
    qa: int | str | os.PathLike | Sequence[str | os.PathLike] | None = None,
    qa_bits: Sequence[int] = (),
    align: bool = False,
    reference: str | os.PathLike | None = None,
    resampling: str | Resampling = "nearest",
    chunks: int | Mapping[str, int] | str | None = None,
) -> xr.DataArray:
    """Open a stack of dated images as a lazy reflectance cube.

    Parameters
    ----------
    source : path or sequence of paths
        A folder of GeoTIFFs (one per date, all bands of that date), a list of GeoTIFF files, or
        a NetCDF file with a variable on (time, band, y, x).
    sensor : str or Sensor, optional
        Sensor id (see :func:`unmix.sensors.get_sensor`); its band names label the file's bands
        when neither ``band_names`` nor complete band descriptions in the files say otherwise.
    band_names : sequence of str, optional
        Names of the bands the files hold, in file order (a QA band inside the file may be listed
        or left out). A count that differs from the file's raises
        :class:`~unmix.errors.BandMismatchError`.
    dates : path, mapping or sequence, optional
        CSV with columns ``file,date``, a mapping file -> date, or one date per file in order.
        Default: dates read from the file names (see the module notes).
    scale, offset : float or sequence of float, optional
        Reflectance = stored x scale + offset [unitless]; override the files' own scale/offset.
        Common: ``scale=0.0001`` for int16 reflectance without metadata.
    qa : int, str, path or sequence of paths, optional
        Quality mask: a band of the files (1-based number or band description), a folder of
        per-date mask files (dates in their names), or a list of them.
    qa_bits : sequence of int
        Bit positions (0 = least significant) that mark a pixel invalid when set. With ``qa`` and
        no bits, any non-zero QA value marks the pixel invalid.
    align : bool
        Warp every date onto the reference grid instead of raising
        :class:`~unmix.errors.GridMismatchError` when CRS, transform or shape differ. A NetCDF
        cube holds every date on one grid, so ``align`` changes nothing for it (no warping).
    reference : path, optional
        Raster whose grid the dates are warped onto with ``align`` (default: the first date). A
        NetCDF cube is not warped: it must lie on this grid, or
        :class:`~unmix.errors.GridMismatchError` is raised.
    resampling : str or Resampling
        Resampling for ``align`` (``nearest``, ``bilinear``, ``cubic``, ``average``, ``mode``).
    chunks : int, mapping or None
        Spatial chunk edge [pixels] (rounded up to whole tiles), ``{"y": ny, "x": nx}``, or None
        for about 1024 x 1024 pixels following the files' tiles. Always one date per chunk in time
        and all bands in one chunk.

    Returns
    -------
    (time, band, y, x) xarray.DataArray
        float32 reflectance [unitless, 0-1] backed by dask, NaN = no data. Coordinates ``time``
        (datetime64, ascending), ``band`` (names), ``y``/``x`` (pixel centres [CRS units]) and
        ``spatial_ref`` (CF grid mapping with ``crs_wkt`` and ``GeoTransform``); attributes
        ``crs_wkt``, ``transform`` (affine a, b, c, d, e, f) and ``input_files``.

    Raises
    ------
    StackReadError
        Missing, empty, truncated or unreadable input, also when found while computing.
    GridMismatchError
        Dates on different grids without ``align``.
    BandMismatchError
        Band counts or names disagree.
    InputError
        Dates missing or repeated (or given for a NetCDF cube, which has its own); bad arguments.

    Examples
    --------
    >>> cube = open_stack("stack/", sensor="landsat8", band_names=["B2", "B3", "B4", "B5", "B6", "B7"],
    ...                   scale=0.0001)  # doctest: +SKIP
    >>> cube.dims  # doctest: +SKIP
    ('time', 'band', 'y', 'x')
    """
    sensor_obj = _resolve_sensor(sensor)
    resampling = Resampling(str(resampling).lower()) if not isinstance(resampling, Resampling) else resampling
    qa_bits = tuple(int(b) for b in qa_bits or ())
    for b in qa_bits:
        if not 0 <= b <= 62:
            raise InputError(f"QA bit {b} is outside 0..62; bits count from 0 (least significant)")

    if isinstance(source, (str, os.PathLike)) and Path(source).is_file() and _is_netcdf(Path(source)):
        if dates is not None:
            raise InputError(
                f"{source} is a NetCDF cube, whose time coordinate gives the dates; leave dates (--dates) out"
            )
        cube = _open_netcdf_stack(
            Path(source), sensor=sensor_obj, band_names=band_names, scale=scale, offset=offset,
            qa=qa, qa_bits=qa_bits, chunks=chunks,
        )
        if reference is not None:
            _check_cube_on_reference(cube, Path(source), _read_header(Path(reference), check_tiles=False))
        return cube

    files = find_stack_files(source)
    date_list = _dates_for(files, dates)
    order = sorted(range(len(files)), key=lambda i: (date_list[i], str(files[i])))
    files = [files[i] for i in order]
    date_list = [date_list[i] for i in order]
    for i in range(1, len(files)):
        if date_list[i] == date_list[i - 1]:
            raise InputError(
                f"{files[i - 1].name} and {files[i].name} have the same date {date_list[i]}; keep one file per "
                "date or give the dates explicitly (--dates CSV with columns file,date)"
            )

    headers = [_read_header(f) for f in files]
    first = headers[0]
    ref = _read_header(Path(reference), check_tiles=False) if reference is not None else first
    for head in headers:
        if head.count != first.count:
            raise BandMismatchError(
                f"{head.path} has {head.count} bands but {first.path} has {first.count}; every date must hold the same bands"
            )
        diffs = _grid_differences(head, ref)
        if diffs and not align:
            raise GridMismatchError(
                f"{head.path} is not on the grid of {ref.path}: {'; '.join(diffs)}; reproject it, or pass "
                "align=True (--align) to warp every date onto the first date's grid"
            )

    # QA
    qa_band = None
    qa_files: list[Path] | None = None
    if qa is not None:
        is_path = not isinstance(qa, (int, np.integer)) and (
            not isinstance(qa, (str, os.PathLike)) or Path(qa).exists()
        )
        if is_path:
            qa_files = _find_qa_files(qa, files, date_list, dates)
            qa_headers = [_read_header(f) for f in qa_files]
            for qh in qa_headers:
                diffs = _grid_differences(qh, ref)
                if diffs and not align:
                    raise GridMismatchError(
                        f"quality mask {qh.path} is not on the grid of {ref.path}: {'; '.join(diffs)}; pass align=True (--align)"
                    )
        else:
            qa_band = _resolve_qa_band(qa, first, band_names)
    refl_indexes = [i for i in range(1, first.count + 1) if i != qa_band]
    names = _band_names_for(first, refl_indexes, band_names, sensor_obj, qa_band)
    user_scales = _as_per_band(scale, len(refl_indexes), "scale", first.path)
    user_offsets = _as_per_band(offset, len(refl_indexes), "offset", first.path)

    crs_wkt = ref.crs.to_wkt() if ref.crs is not None else None
    transform = tuple(ref.transform)[:6]
    if transform[1] != 0 or transform[3] != 0:
        raise GridMismatchError(
            f"{ref.path} has a rotated grid (transform {transform}); warp it to a north-up grid first"
        )
    warp = (crs_wkt, transform, ref.width, ref.height, resampling.value)
    if align and crs_wkt is None:
        raise GridMismatchError(f"{ref.path} has no CRS; align=True needs georeferenced files")

    readers = []
    for k, (head, d) in enumerate(zip(headers, date_list)):
        scales = user_scales or tuple(
            1.0 if s is None or not np.isfinite(s) else float(s) for s in (head.scales[i - 1] for i in refl_indexes)
        )
        offsets = user_offsets or tuple(
            0.0 if o is None or not np.isfinite(o) else float(o) for o in (head.offsets[i - 1] for i in refl_indexes)
        )
        needs_warp = align and bool(_grid_differences(head, ref))
        if qa_files is not None:
            qa_head = qa_headers[k]
            qa_path, qband, qnodata, qa_identity = str(qa_files[k]), 1, qa_head.nodata[0], qa_head.identity
            needs_warp = needs_warp or (align and bool(_grid_differences(qa_head, ref)))
        elif qa_band is not None:
            qa_path, qband, qnodata, qa_identity = str(head.path), qa_band, head.nodata[qa_band - 1], head.identity
        else:
            qa_path, qband, qnodata, qa_identity = None, None, None, None
        readers.append(
            _DateReader(
                path=str(head.path),
                date=str(d),
                band_indexes=tuple(refl_indexes),
                scales=scales,
                offsets=offsets,
                nodata=tuple(head.nodata[i - 1] for i in refl_indexes),
                identity=head.identity,
                qa_path=qa_path,
                qa_band=qband,
                qa_mask=sum(1 << b for b in qa_bits),
                qa_nodata=qnodata,
                qa_identity=qa_identity,
                warp=warp if needs_warp else None,
                tiles=None if needs_warp else head.tiles,
            )
        )

    ychunks, xchunks = _spatial_chunks(ref.height, ref.width, first.block_shape, chunks)
    data = _dask_from_readers(readers, len(refl_indexes), ychunks, xchunks)

    a, _, c, _, e, f = transform
    x = c + a * (np.arange(ref.width) + 0.5)
    y = f + e * (np.arange(ref.height) + 0.5)
    x_attrs, y_attrs = xy_attrs(crs_wkt)
    times = np.array(date_list, dtype="datetime64[D]").astype("datetime64[ns]")
    cube = xr.DataArray(
        data,
        dims=("time", "band", "y", "x"),
        coords={
            "time": ("time", times, {"standard_name": "time", "long_name": "acquisition date"}),
            "band": ("band", np.array(names, dtype=object).astype(str), {"long_name": "sensor band"}),
            "y": ("y", y, y_attrs),
            "x": ("x", x, x_attrs),
            "spatial_ref": ((), np.int32(0), grid_mapping_attrs(crs_wkt, transform)),
        },
        name="reflectance",
        attrs={
            "long_name": "surface reflectance",
            "units": "1",
            "crs_wkt": crs_wkt or "",
            "transform": transform,
            "grid_mapping": "spatial_ref",
            "input_files": tuple(str(f) for f in files),
        },
    )
    if sensor_obj is not None:
        cube.attrs["sensor"] = str(getattr(sensor_obj, "id", sensor_obj))
    if qa_files is not None:
        cube.attrs["qa_files"] = tuple(str(f) for f in qa_files)
    return cube



def _check_cube_on_reference(cube: xr.DataArray, path: Path, ref: Any) -> None:
    """A NetCDF cube is read on its own grid: refuse a ``reference`` grid it does not match."""
    from rasterio.crs import CRS

    diffs = []
    wkt = cube.attrs.get("crs_wkt") or None
    ref_wkt = ref.crs.to_wkt() if ref.crs is not None else None
    if (wkt is None) != (ref_wkt is None) or (wkt is not None and CRS.from_wkt(wkt) != ref.crs):
        diffs.append(f"CRS {wkt} vs {ref_wkt}")
    transform = cube.attrs.get("transform")
    ref_t = tuple(ref.transform)[:6]
    tol = 1e-6 * max(abs(ref_t[0]), abs(ref_t[4]), 1e-12)
    if transform is None or any(abs(a - b) > tol for a, b in zip(tuple(transform)[:6], ref_t)):
        diffs.append(f"transform {None if transform is None else tuple(transform)[:6]} vs {ref_t}")
    if (cube.sizes["y"], cube.sizes["x"]) != (ref.height, ref.width):
        diffs.append(f"shape {cube.sizes['y']} x {cube.sizes['x']} vs {ref.height} x {ref.width} (rows x columns)")
    if diffs:
        raise GridMismatchError(
            f"the NetCDF cube {path} is not on the grid of the reference {ref.path}: {'; '.join(diffs)}; a cube is "
            "read on its own grid (all its dates share it), so warp the cube onto the reference grid first, or "
            "leave reference out"
        )
