"""GeoTIFF dates of a stack: headers, tile-index checks, grid comparison and the per-date window reader.

A :class:`_DateReader` holds paths and numbers only (no open handles), so the dask graph pickles
for process-based workers. Each call reads one window of one date into a band-last float32 buffer,
either straight from the file's blocks (:mod:`._tiff_blocks`: tifffile + imagecodecs, for the plain
layouts it lists) or through GDAL (every other layout, warped reads and quality masks). Every read
first checks that the file is still the version recorded when the stack was opened
(:class:`.files.FileIdentity`), on the handle it reads (direct path) or around GDAL's read.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ...errors import StackReadError
from ._numba import decode_bands, decode_bands_last
from ._tiff_blocks import BlockLayout, block_layout, read_window
from .files import FileIdentity

#: Largest raster edge a stack file may have [pixels]: a header claiming more is taken as damaged
#: before anything is allocated for it (a whole Landsat or Sentinel-2 scene is about 11,000 pixels).
MAX_EDGE = 1 << 20


def gdal_message(exc: BaseException) -> str:
    """The messages of an exception and its causes, without rasterio's "see previous exception" stand-ins.

    rasterio raises ``RasterioIOError("Read or write failed. See previous exception")`` from the
    GDAL error (``CPLE_*Error``) that says what went wrong; this joins the informative ones, the
    cause first.
    """
    chain: list[str] = []
    seen: set[int] = set()
    current: BaseException | None = exc
    while current is not None and id(current) not in seen:
        seen.add(id(current))
        text = " ".join(str(current).split())
        if text and "previous exception" not in text.lower() and text not in chain:
            chain.append(text)
        current = current.__cause__ or current.__context__
    return "; ".join(reversed(chain)) or type(exc).__name__


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
    identity: FileIdentity
    tiles: BlockLayout | None = None  # set when the file's blocks can be read directly


def _check_block_count(src: Any, path: Path, size: int) -> None:
    """A TIFF stores at least one byte per tile or strip (its data, or its offset and byte count):
    a header claiming more blocks than the file has bytes is damaged (checked before any use of it)."""
    if src.driver != "GTiff":
        return
    bh, bw = src.block_shapes[0]
    n_blocks = math.ceil(src.height / max(bh, 1)) * math.ceil(src.width / max(bw, 1))
    if n_blocks > size:
        raise StackReadError(
            f"{path} claims {src.height} x {src.width} pixels in {n_blocks} blocks of {bh} x {bw} but has only "
            f"{size} bytes, too few to hold them; the header is damaged: copy or download the file again"
        )


def _read_header(path: Path, check_tiles: bool = True) -> _Header:
    """The header of ``path``; :class:`StackReadError` (one line, GDAL's own reason) when it cannot be read."""
    import rasterio

    try:
        with open(path, "rb") as fh, rasterio.open(path) as src:
            identity = FileIdentity.of(os.fstat(fh.fileno()))
            if max(src.width, src.height) > MAX_EDGE:
                raise StackReadError(
                    f"{path} claims {src.height} x {src.width} pixels (rows x columns), more than the "
                    f"{MAX_EDGE} pixels per edge a stack file may have; the header is damaged, or cut the "
                    "raster into smaller files"
                )
            _check_block_count(src, path, identity.size)
            tiles = block_layout(path, fh, src) if check_tiles else None
            if check_tiles and tiles is None:
                _check_tiles(src, path)
            identity.check(os.stat(path), path)  # GDAL opened the version recorded
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
                identity=identity,
                tiles=tiles,
            )
    except StackReadError:
        raise
    except Exception as exc:  # noqa: BLE001 - rasterio/GDAL raise several types for damaged files
        raise StackReadError(
            f"cannot open {path} as a raster ({gdal_message(exc)}); the file may be truncated or not a GeoTIFF"
        ) from None


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
    identity: FileIdentity  # the version of ``path`` recorded when the stack was opened
    qa_path: str | None = None
    qa_band: int | None = None
    qa_mask: int = 0
    qa_nodata: float | None = None
    qa_identity: FileIdentity | None = None  # the version of ``qa_path`` (required with it)
    warp: tuple | None = None  # (crs_wkt, transform 6-tuple, width, height, resampling name)
    tiles: BlockLayout | None = None  # the file's block layout when it is read directly (never with warp)

    def __call__(self, window: tuple[int, int, int, int]) -> np.ndarray:
        row0, row1, col0, col1 = window
        try:
            has_nd = np.array([nd is not None and not (isinstance(nd, float) and math.isnan(nd)) for nd in self.nodata])
            nd_values = np.array([nd if ok else 0 for nd, ok in zip(self.nodata, has_nd)], dtype=np.float64)
            scales, offsets = np.asarray(self.scales, np.float64), np.asarray(self.offsets, np.float64)
            mask = None
            if self.tiles is not None and self.warp is None:
                out = read_window(self.tiles, self.path, self.identity, self.band_indexes, window, scales, offsets,
                                  nd_values, has_nd).transpose(2, 0, 1)
            else:
                out, mask = self._read_gdal(window, scales, offsets, nd_values, has_nd)
            if mask is not None:
                out[:, ~mask] = np.nan
            if self.qa_path is not None:
                qa_raw, qa_valid = self._read(self.qa_path, self.qa_identity, (self.qa_band,), window, "nearest")
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
                f"reading {self.path} (date {self.date}), rows {row0}-{row1}, columns {col0}-{col1} failed: "
                f"{gdal_message(exc)}; the file may be truncated or damaged"
            ) from None
        return out[np.newaxis]

    def _read_gdal(self, window: tuple, scales: np.ndarray, offsets: np.ndarray, nd_values: np.ndarray,
                   has_nd: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Reflectance (band, y, x) of a window read through GDAL, and the warp's validity mask (or None)."""
        raw, mask = self._read(self.path, self.identity, self.band_indexes, window, self.warp_resampling,
                               band_last=True)
        # (band, y, x) views of band-last buffers: the values of a pixel lie side by side, as the
        # per-pixel solvers read them (and as pixel-interleaved GeoTIFFs store them)
        out = np.empty(raw.shape[1:] + raw.shape[:1], dtype=np.float32).transpose(2, 0, 1)
        if raw.strides[0] < raw.strides[2]:  # band-last buffer, as read without warping
            decode_bands_last(raw.transpose(1, 2, 0), scales, offsets, nd_values, has_nd, out.transpose(1, 2, 0))
        else:
            decode_bands(raw, scales, offsets, nd_values, has_nd, out)
        return out, mask

    @property
    def warp_resampling(self) -> str:
        return self.warp[4] if self.warp is not None else "nearest"

    def _read(self, path: str, identity: FileIdentity | None, indexes: tuple, window: tuple, resampling: str,
              band_last: bool = False) -> tuple[np.ndarray, np.ndarray | None]:
        """Stored values (band, y, x) of a window; with ``band_last`` a view of a (y, x, band) buffer.

        GDAL opens the file by its path: the version recorded in ``identity`` must be there before
        the read, on a handle held across it, and under the path after it.
        """
        if identity is None:
            raise StackReadError(f"{path}: no recorded version to check the read against; open the stack again")
        with open(path, "rb") as fh:
            identity.check(os.fstat(fh.fileno()), path)
            result = self._read_gdal_window(path, indexes, window, resampling, band_last)
            identity.check(os.fstat(fh.fileno()), path)
            identity.check(os.stat(path), path)
        return result

    def _read_gdal_window(self, path: str, indexes: tuple, window: tuple, resampling: str,
                          band_last: bool) -> tuple[np.ndarray, np.ndarray | None]:
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

