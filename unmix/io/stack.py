"""Open an image time stack as a lazy (time, band, y, x) reflectance cube.

This is the only module that opens stack paths. Three sources are understood:

* a folder of GeoTIFFs (``*.tif`` / ``*.tiff``), one file per date holding all bands of that date;
* a list of such files;
* a NetCDF cube with a variable on dims (time, band, y, x).

GeoTIFFs are read lazily, one dask task per (date, block of tiles), each task opening the file by
its path with rasterio (so the graph runs on the threaded scheduler and on process-based
dask.distributed workers alike). Every file is opened, its header and tile index checked, and its
grid compared with the first date's when the stack is opened, so a truncated file or a date on
another grid is reported before any computing starts.

Dates
-----
Taken, in this order of precedence, from

1. ``dates``: a CSV file with columns ``file,date`` (file name or path; ISO date), a mapping
   file -> date, or a sequence of dates in the order of the files;
2. the file name (not the folder), searched for

   a. ``YYYY-MM-DD`` (also with ``_`` or ``.`` as separator),
   b. ``YYYYMMDD`` (a run of exactly 8 digits),
   c. ``YYYYDDD`` (a run of exactly 7 digits: year and day of year 001-366).

   The first pattern that matches anywhere in the name wins; within it the leftmost date is used
   (product names such as ``..._20200115_20200823_...`` put the acquisition date before the
   processing date). Years outside 1950-2100 and impossible dates are not matches. A name with no
   date raises :class:`~unmix.errors.InputError` naming the file and suggesting ``dates``; two files
   on the same date raise one naming both files.

Values
------
Reflectance = stored value x scale + offset, as float32. The file's own GDAL scale/offset per
band is used when present; ``scale``/``offset`` arguments override it. The file's nodata value
becomes NaN before scaling, NaN stays NaN, and with a quality mask (``qa``) a pixel with any of
``qa_bits`` set (or, with no bits given, any non-zero QA value) becomes NaN in every band.
"""

from __future__ import annotations

import csv
import datetime as _dt
import enum
import math
import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ..errors import (
    BandMismatchError,
    GridMismatchError,
    InputError,
    StackReadError,
    UnknownNameError,
)
from ._stack_numba import decode_bands, decode_bands_last
from .products import grid_mapping_attrs, xy_attrs

__all__ = ["open_stack", "date_from_name", "read_dates_csv", "find_stack_files", "Resampling"]


class Resampling(str, enum.Enum):
    """Resampling used by ``align=True`` when a date is warped onto the reference grid."""

    NEAREST = "nearest"
    BILINEAR = "bilinear"
    CUBIC = "cubic"
    AVERAGE = "average"
    MODE = "mode"

    def __str__(self) -> str:
        return self.value


GEOTIFF_SUFFIXES = (".tif", ".tiff")
NETCDF_SUFFIXES = (".nc", ".nc4", ".cdf", ".netcdf")

#: Target chunk edge [pixels] when the chunking follows the files' tiles.
_TARGET_EDGE = 1024


# --------------------------------------------------------------------------------------------------
# dates


_SEPARATED = re.compile(r"(?<!\d)(\d{4})[-_.](\d{2})[-_.](\d{2})(?!\d)")
_EIGHT = re.compile(r"(?<!\d)(\d{4})(\d{2})(\d{2})(?!\d)")
_SEVEN = re.compile(r"(?<!\d)(\d{4})(\d{3})(?!\d)")


def _valid_year(year: int) -> bool:
    return 1950 <= year <= 2100


def date_from_name(name: str | os.PathLike) -> np.datetime64 | None:
    """The acquisition date in a file name, or None.

    Patterns in order of precedence: ``YYYY-MM-DD`` (``-``, ``_`` or ``.``), ``YYYYMMDD`` (exactly 8
    digits), ``YYYYDDD`` (exactly 7 digits, day of year). Only the file name is searched, not its
    folder; the first pattern that matches wins and within it the leftmost valid date.

    Parameters
    ----------
    name : str or path

    Returns
    -------
    numpy.datetime64 [D] or None

    Examples
    --------
    >>> str(date_from_name("scene_2021-03-04.tif"))
    '2021-03-04'
    >>> str(date_from_name("LC08_038037_20200115_20200823_02.tif"))
    '2020-01-15'
    >>> str(date_from_name("mosaic_2020032.tif"))
    '2020-02-01'
    >>> date_from_name("no_date_here.tif") is None
    True
    """
    stem = Path(name).name
    for pattern in (_SEPARATED, _EIGHT):
        for match in pattern.finditer(stem):
            year, month, day = (int(g) for g in match.groups())
            if not _valid_year(year):
                continue
            try:
                return np.datetime64(_dt.date(year, month, day), "D")
            except ValueError:
                continue
    for match in _SEVEN.finditer(stem):
        year, doy = int(match.group(1)), int(match.group(2))
        if not _valid_year(year) or not 1 <= doy <= (366 if _is_leap(year) else 365):
            continue
        return np.datetime64(_dt.date(year, 1, 1) + _dt.timedelta(days=doy - 1), "D")
    return None


def _is_leap(year: int) -> bool:
    return year % 4 == 0 and (year % 100 != 0 or year % 400 == 0)


def _parse_date(text: Any, where: str) -> np.datetime64:
    if isinstance(text, np.datetime64):
        return text.astype("datetime64[D]")
    if isinstance(text, _dt.date):
        return np.datetime64(text, "D")
    value = str(text).strip()
    try:
        return np.datetime64(value, "D") if len(value) <= 10 else np.datetime64(value).astype("datetime64[D]")
    except ValueError:
        parsed = date_from_name(value)
        if parsed is None:
            raise InputError(f"{where}: cannot read {value!r} as a date; write dates as YYYY-MM-DD") from None
        return parsed


def read_dates_csv(path: str | os.PathLike) -> dict[str, np.datetime64]:
    """Read a ``file,date`` CSV into a mapping file name -> date.

    Parameters
    ----------
    path : path
        CSV with a header row naming the columns ``file`` and ``date`` (other columns are ignored).
        ``file`` is a file name or path; ``date`` is ISO ``YYYY-MM-DD``.

    Returns
    -------
    dict
        Keys are the ``file`` values as written; lookups match by full path or by name.
    """
    path = Path(path)
    if not path.is_file():
        raise StackReadError(f"dates file {path} not found; give a CSV with columns file,date")
    with path.open(newline="", encoding="utf-8-sig") as fh:
        reader = csv.DictReader(fh)
        fields = [f.strip().lower() for f in (reader.fieldnames or [])]
        if "file" not in fields or "date" not in fields:
            raise InputError(
                f"dates file {path} needs a header row with columns file,date; found {reader.fieldnames}"
            )
        reader.fieldnames = fields
        out: dict[str, np.datetime64] = {}
        for line_no, row in enumerate(reader, start=2):
            name = (row.get("file") or "").strip()
            if not name:
                continue
            out[name] = _parse_date(row.get("date"), f"{path}, line {line_no}")
    return out


def _lookup_date(mapping: Mapping[str, Any], path: Path) -> Any:
    for key in (str(path), path.name, path.stem):
        if key in mapping:
            return mapping[key]
    resolved = str(path.resolve())
    for key, value in mapping.items():
        if str(Path(key).resolve()) == resolved or Path(key).name == path.name:
            return value
    return None


def _dates_for(files: Sequence[Path], dates: Any) -> list[np.datetime64]:
    if dates is None:
        out = []
        for f in files:
            d = date_from_name(f)
            if d is None:
                raise InputError(
                    f"no date in the file name {f.name!r} (looked for YYYY-MM-DD, YYYYMMDD, YYYYDDD); "
                    "rename the file or give the dates as a CSV with columns file,date (--dates)"
                )
            out.append(d)
        return out
    if isinstance(dates, (str, os.PathLike)):
        mapping: Mapping[str, Any] = read_dates_csv(dates)
        source = str(dates)
    elif isinstance(dates, Mapping):
        mapping = {str(k): v for k, v in dates.items()}
        source = "the dates mapping"
    else:
        seq = list(dates)
        if len(seq) != len(files):
            raise InputError(f"{len(seq)} dates given for {len(files)} files; give one date per file")
        return [_parse_date(d, f"date of {f.name}") for d, f in zip(seq, files)]
    out = []
    for f in files:
        value = _lookup_date(mapping, f)
        if value is None:
            raise InputError(f"{f.name} is not listed in {source}; add a row '{f.name},YYYY-MM-DD'")
        out.append(_parse_date(value, f"{source}, file {f.name}"))
    return out


# --------------------------------------------------------------------------------------------------
# files


def find_stack_files(source: str | os.PathLike | Sequence[str | os.PathLike]) -> list[Path]:
    """The GeoTIFF files of a stack: a folder's ``*.tif``/``*.tiff`` (sorted by name) or the list given.

    Raises
    ------
    StackReadError
        The folder or a listed file does not exist, or the folder holds no GeoTIFF.
    """
    if isinstance(source, (str, os.PathLike)):
        path = Path(source)
        if path.is_dir():
            files = sorted(
                p for p in path.iterdir() if p.suffix.lower() in GEOTIFF_SUFFIXES and not p.name.startswith(".")
            )
            if not files:
                raise StackReadError(
                    f"no GeoTIFFs (*.tif, *.tiff) were found in the folder {path}; put one file per date there "
                    "or pass the files themselves"
                )
            return files
        if not path.exists():
            raise StackReadError(f"stack {path} not found; give a folder of GeoTIFFs, GeoTIFF files or a NetCDF cube")
        return [path]
    files = [Path(p) for p in source]
    if not files:
        raise StackReadError("the list of stack files is empty; give at least one GeoTIFF")
    for f in files:
        if not f.is_file():
            raise StackReadError(f"stack file {f} not found; check the path")
    return files


def _is_netcdf(path: Path) -> bool:
    if path.suffix.lower() in NETCDF_SUFFIXES:
        return True
    try:
        with path.open("rb") as fh:
            magic = fh.read(8)
    except OSError:
        return False
    return magic[:3] == b"CDF" or magic[:8] == b"\x89HDF\r\n\x1a\n"


def _check_tiles(src: Any, path: Path) -> None:
    """Every tile/strip of the first and last band must lie inside the file (catches truncation)."""
    size = path.stat().st_size
    bh, bw = src.block_shapes[0]
    n_rows = math.ceil(src.height / bh)
    n_cols = math.ceil(src.width / bw)
    bands = sorted({1, src.count})
    total = n_rows * n_cols
    step = max(1, total // 4096)  # very large files: a sample of tiles, always including the last
    indexes = list(range(0, total, step))
    if indexes[-1] != total - 1:
        indexes.append(total - 1)
    for b in bands:
        for k in indexes:
            row, col = divmod(k, n_cols)
            off = src.get_tag_item(f"BLOCK_OFFSET_{col}_{row}", "TIFF", bidx=b)
            if off is None:
                return  # not a TIFF, or GDAL does not expose the tile index: rely on read errors
            cnt = src.get_tag_item(f"BLOCK_SIZE_{col}_{row}", "TIFF", bidx=b)
            if int(off) and cnt is not None and int(off) + int(cnt) > size:
                raise StackReadError(
                    f"{path} is truncated or damaged: tile ({row}, {col}) of band {b} ends at byte "
                    f"{int(off) + int(cnt)} but the file has {size} bytes; copy or download it again"
                )


@dataclass(frozen=True)
class _Header:
    path: Path
    crs: Any
    transform: Any
    width: int
    height: int
    count: int
    dtype: str
    nodata: tuple
    scales: tuple
    offsets: tuple
    descriptions: tuple
    block_shape: tuple


def _read_header(path: Path, check_tiles: bool = True) -> _Header:
    import rasterio
    from rasterio.errors import RasterioIOError

    try:
        with rasterio.open(path) as src:
            if check_tiles:
                _check_tiles(src, path)
            return _Header(
                path=path,
                crs=src.crs,
                transform=src.transform,
                width=src.width,
                height=src.height,
                count=src.count,
                dtype=src.dtypes[0],
                nodata=tuple(src.nodatavals),
                scales=tuple(src.scales),
                offsets=tuple(src.offsets),
                descriptions=tuple(src.descriptions),
                block_shape=tuple(src.block_shapes[0]),
            )
    except StackReadError:
        raise
    except (RasterioIOError, OSError, ValueError) as exc:
        raise StackReadError(f"cannot open {path} as a raster ({exc}); the file may be truncated or not a GeoTIFF") from None


def _grid_differences(head: _Header, ref: _Header) -> list[str]:
    diffs = []
    if head.crs != ref.crs:
        diffs.append(f"CRS {head.crs} vs {ref.crs}")
    tol = 1e-6 * max(abs(ref.transform.a), abs(ref.transform.e), 1e-12)
    if any(abs(a - b) > tol for a, b in zip(tuple(head.transform)[:6], tuple(ref.transform)[:6])):
        diffs.append(f"transform {tuple(head.transform)[:6]} vs {tuple(ref.transform)[:6]}")
    if (head.height, head.width) != (ref.height, ref.width):
        diffs.append(f"shape {head.height} x {head.width} vs {ref.height} x {ref.width} (rows x columns)")
    return diffs


# --------------------------------------------------------------------------------------------------
# the reader that runs inside dask tasks


@dataclass(frozen=True)
class _DateReader:
    """Everything one task needs to read a window of one date: paths and numbers, no open handles."""

    path: str
    date: str
    band_indexes: tuple  # 1-based GDAL band numbers of the reflectance bands
    scales: tuple
    offsets: tuple
    nodata: tuple
    qa_path: str | None = None
    qa_band: int | None = None
    qa_mask: int = 0
    qa_nodata: float | None = None
    warp: tuple | None = None  # (crs_wkt, transform 6-tuple, width, height, resampling name)

    def __call__(self, window: tuple[int, int, int, int]) -> np.ndarray:
        row0, row1, col0, col1 = window
        try:
            raw, mask = self._read(self.path, self.band_indexes, window, self.warp_resampling, band_last=True)
            # (band, y, x) views of band-last buffers: the values of a pixel lie side by side, as the
            # per-pixel solvers read them (and as pixel-interleaved GeoTIFFs store them)
            out = np.empty(raw.shape[1:] + raw.shape[:1], dtype=np.float32).transpose(2, 0, 1)
            has_nd = np.array([nd is not None and not (isinstance(nd, float) and math.isnan(nd)) for nd in self.nodata])
            nd_values = np.array([nd if ok else 0 for nd, ok in zip(self.nodata, has_nd)], dtype=np.float64)
            scales, offsets = np.asarray(self.scales, np.float64), np.asarray(self.offsets, np.float64)
            if raw.strides[0] < raw.strides[2]:  # band-last buffer, as read without warping
                decode_bands_last(raw.transpose(1, 2, 0), scales, offsets, nd_values, has_nd, out.transpose(1, 2, 0))
            else:
                decode_bands(raw, scales, offsets, nd_values, has_nd, out)
            if mask is not None:
                out[:, ~mask] = np.nan
            if self.qa_path is not None:
                qa_raw, qa_valid = self._read(self.qa_path, (self.qa_band,), window, "nearest")
                qa = qa_raw[0]
                if qa.dtype.kind == "f":
                    bad = ~np.isfinite(qa)
                    qa_int = np.where(bad, 0, qa).astype(np.int64)
                else:
                    bad = np.zeros(qa.shape, bool)
                    qa_int = qa.astype(np.int64)
                if self.qa_nodata is not None and not math.isnan(self.qa_nodata):
                    bad |= qa == self.qa_nodata
                if qa_valid is not None:
                    bad |= ~qa_valid
                bad |= (qa_int & self.qa_mask) != 0 if self.qa_mask else qa_int != 0
                out[:, bad] = np.nan
        except StackReadError:
            raise
        except Exception as exc:  # rasterio/GDAL raise several types for damaged files
            raise StackReadError(
                f"reading {self.path} (date {self.date}), rows {row0}-{row1}, columns {col0}-{col1} failed: {exc}; "
                "the file may be truncated or damaged"
            ) from None
        return out[np.newaxis]

    @property
    def warp_resampling(self) -> str:
        return self.warp[4] if self.warp is not None else "nearest"

    def _read(self, path: str, indexes: tuple, window: tuple, resampling: str,
              band_last: bool = False) -> tuple[np.ndarray, np.ndarray | None]:
        """Stored values (band, y, x) of a window; with ``band_last`` a view of a (y, x, band) buffer."""
        import rasterio
        from rasterio.windows import Window

        row0, row1, col0, col1 = window
        win = Window(col0, row0, col1 - col0, row1 - row0)
        with rasterio.open(path) as src:
            if self.warp is None:
                if not band_last:
                    return src.read(list(indexes), window=win), None
                # GDAL fills the strided buffer directly (no copy afterwards)
                buf = np.empty((row1 - row0, col1 - col0, len(indexes)), dtype=src.dtypes[indexes[0] - 1])
                return src.read(list(indexes), window=win, out=buf.transpose(2, 0, 1)), None
            from affine import Affine
            from rasterio.crs import CRS
            from rasterio.enums import Resampling as RioResampling
            from rasterio.vrt import WarpedVRT

            crs_wkt, transform, width, height, _ = self.warp
            with WarpedVRT(
                src,
                crs=CRS.from_wkt(crs_wkt),
                transform=Affine(*transform),
                width=width,
                height=height,
                resampling=getattr(RioResampling, resampling),
                add_alpha=src.nodata is None,
            ) as vrt:
                data = vrt.read(list(indexes), window=win)
                valid = vrt.read_masks(indexes[0], window=win) > 0
            return data, valid


def _read_block(reader: _DateReader, window: tuple[int, int, int, int]) -> np.ndarray:
    return reader(window)


# --------------------------------------------------------------------------------------------------
# bands, scaling, QA


def _resolve_sensor(sensor: Any) -> Any:
    if sensor is None or not isinstance(sensor, str):
        return sensor
    from ..sensors import get_sensor

    return get_sensor(sensor)


def _as_per_band(value: Any, n: int, name: str, where: str) -> tuple[float, ...] | None:
    if value is None:
        return None
    if np.ndim(value) == 0:
        return (float(value),) * n
    values = tuple(float(v) for v in value)
    if len(values) != n:
        raise BandMismatchError(f"{len(values)} {name} values given for {n} bands of {where}; give one value or one per band")
    return values


def _resolve_qa_band(qa: Any, head: _Header, band_names: Sequence[str] | None) -> int:
    if isinstance(qa, (int, np.integer)) and not isinstance(qa, bool):
        if not 1 <= int(qa) <= head.count:
            raise InputError(f"QA band {qa} is outside bands 1..{head.count} of {head.path}; band numbers start at 1")
        return int(qa)
    name = str(qa)
    if name.isdigit():
        return _resolve_qa_band(int(name), head, band_names)
    for i, desc in enumerate(head.descriptions, start=1):
        if desc is not None and desc.lower() == name.lower():
            return i
    if band_names is not None and len(band_names) == head.count:
        for i, bn in enumerate(band_names, start=1):
            if bn.lower() == name.lower():
                return i
    known = [d for d in head.descriptions if d] or list(band_names or [])
    raise UnknownNameError(
        f"QA band {name!r} is neither a band of {head.path} nor an existing mask file or folder; "
        f"bands named in the file: {', '.join(known) if known else 'none (use a 1-based band number)'}"
    )


def _band_names_for(
    head: _Header, refl_indexes: list[int], band_names: Sequence[str] | None, sensor: Any, qa_band: int | None
) -> list[str]:
    n = len(refl_indexes)
    if band_names is not None:
        names = [str(b).strip() for b in band_names]
        if qa_band is not None and len(names) == head.count:
            names = [nm for i, nm in enumerate(names, start=1) if i != qa_band]
        if len(names) != n:
            extra = f" (plus the QA band {qa_band})" if qa_band is not None else ""
            raise BandMismatchError(
                f"{len(names)} band names given ({', '.join(names)}) but {head.path} holds {n} reflectance bands{extra}; "
                "list one name per band of the file, in file order"
            )
    else:
        descs = [head.descriptions[i - 1] for i in refl_indexes]
        sensor_bands = tuple(getattr(sensor, "band_names", ()) or ())
        if all(descs) and (not sensor_bands or all(d in sensor_bands for d in descs)):
            names = [str(d) for d in descs]
        elif sensor_bands:
            if len(sensor_bands) != n:
                raise BandMismatchError(
                    f"{head.path} holds {n} reflectance bands but sensor {getattr(sensor, 'id', sensor)} has "
                    f"{len(sensor_bands)} ({', '.join(sensor_bands)}); say which bands the file holds with "
                    "band_names (--band-names B2,B3,...)"
                )
            names = list(sensor_bands)
        else:
            names = [f"band_{i}" for i in refl_indexes]
    if len(set(names)) != len(names):
        raise BandMismatchError(f"band names repeat ({', '.join(names)}); give each band of {head.path} its own name")
    return names


def _find_qa_files(qa: Any, files: Sequence[Path], dates: list[np.datetime64], dates_arg: Any) -> list[Path]:
    qa_files = find_stack_files(qa)
    qa_dates = _dates_for(qa_files, dates_arg if isinstance(dates_arg, (str, os.PathLike, Mapping)) and _all_listed(qa_files, dates_arg) else None)
    by_date: dict[Any, Path] = {}
    for f, d in zip(qa_files, qa_dates):
        by_date.setdefault(d, f)
    out = []
    for f, d in zip(files, dates):
        if d not in by_date:
            raise InputError(
                f"no quality-mask file for {d} (stack file {f.name}) among {len(qa_files)} mask files "
                f"({qa}); give one mask per date with the date in its name"
            )
        out.append(by_date[d])
    return out


def _all_listed(files: Sequence[Path], dates_arg: Any) -> bool:
    mapping = read_dates_csv(dates_arg) if isinstance(dates_arg, (str, os.PathLike)) else dates_arg
    return all(_lookup_date(mapping, f) is not None for f in files)


# --------------------------------------------------------------------------------------------------
# chunks


def _spatial_chunks(height: int, width: int, block_shape: tuple[int, int], chunks: Any) -> tuple[tuple, tuple]:
    bh, bw = block_shape
    if chunks is None or chunks == "auto":
        if bw >= width:  # striped file: whole rows, about _TARGET_EDGE**2 pixels per chunk
            ch = max(bh, (_TARGET_EDGE * _TARGET_EDGE // max(width, 1)) // bh * bh)
            cw = width
        else:
            ch = max(bh, _TARGET_EDGE // bh * bh)
            cw = max(bw, _TARGET_EDGE // bw * bw)
    elif isinstance(chunks, Mapping):
        ch = int(chunks.get("y", height) or height)
        cw = int(chunks.get("x", width) or width)
    else:
        edge = int(chunks)
        if edge < 1:
            raise InputError(f"chunk size must be a positive number of pixels, got {chunks}")
        ch = edge if bh >= height else max(bh, math.ceil(edge / bh) * bh) if edge >= bh else edge
        cw = edge if bw >= width else max(bw, math.ceil(edge / bw) * bw) if edge >= bw else edge
    ch, cw = min(ch, height), min(cw, width)

    def split(total: int, step: int) -> tuple[int, ...]:
        sizes = [step] * (total // step)
        if total % step:
            sizes.append(total % step)
        return tuple(sizes)

    return split(height, ch), split(width, cw)


# --------------------------------------------------------------------------------------------------
# public entry point


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
        :class:`~unmix.errors.GridMismatchError` when CRS, transform or shape differ.
    reference : path, optional
        Raster whose grid the dates are warped onto with ``align`` (default: the first date).
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
        Missing, empty, truncated or unreadable input.
    GridMismatchError
        Dates on different grids without ``align``.
    BandMismatchError
        Band counts or names disagree.
    InputError
        Dates missing or repeated; bad arguments.

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
        return _open_netcdf_stack(
            Path(source), sensor=sensor_obj, band_names=band_names, scale=scale, offset=offset,
            qa=qa, qa_bits=qa_bits, chunks=chunks,
        )

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
            qa_head = _read_header(qa_files[k], check_tiles=False)
            qa_path, qband, qnodata = str(qa_files[k]), 1, qa_head.nodata[0]
            needs_warp = needs_warp or (align and bool(_grid_differences(qa_head, ref)))
        elif qa_band is not None:
            qa_path, qband, qnodata = str(head.path), qa_band, head.nodata[qa_band - 1]
        else:
            qa_path, qband, qnodata = None, None, None
        readers.append(
            _DateReader(
                path=str(head.path),
                date=str(d),
                band_indexes=tuple(refl_indexes),
                scales=scales,
                offsets=offsets,
                nodata=tuple(head.nodata[i - 1] for i in refl_indexes),
                qa_path=qa_path,
                qa_band=qband,
                qa_mask=sum(1 << b for b in qa_bits),
                qa_nodata=qnodata,
                warp=warp if needs_warp else None,
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


def _dask_from_readers(readers: list[_DateReader], n_bands: int, ychunks: tuple, xchunks: tuple) -> Any:
    import dask.array as da
    from dask.base import tokenize

    name = "read-stack-" + tokenize(readers, ychunks, xchunks)
    dsk: dict = {}
    ystarts = np.concatenate([[0], np.cumsum(ychunks)])
    xstarts = np.concatenate([[0], np.cumsum(xchunks)])
    for t, reader in enumerate(readers):
        for i in range(len(ychunks)):
            for j in range(len(xchunks)):
                window = (int(ystarts[i]), int(ystarts[i + 1]), int(xstarts[j]), int(xstarts[j + 1]))
                dsk[(name, t, 0, i, j)] = (_read_block, reader, window)
    chunks = ((1,) * len(readers), (n_bands,), ychunks, xchunks)
    return da.Array(dsk, name, chunks, dtype=np.float32, meta=np.empty((0, 0, 0, 0), np.float32))


# --------------------------------------------------------------------------------------------------
# NetCDF cubes


def _open_netcdf_stack(
    path: Path, *, sensor: Any, band_names: Any, scale: Any, offset: Any, qa: Any, qa_bits: tuple, chunks: Any
) -> xr.DataArray:
    from ..cube.georef import georef_of

    override = scale is not None or offset is not None
    try:
        ds = xr.open_dataset(path, engine="netcdf4", chunks={}, decode_coords="all", mask_and_scale=not override)
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
