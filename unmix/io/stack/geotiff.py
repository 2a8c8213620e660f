"""GeoTIFF dates of a stack: headers, tile-index checks, grid comparison and the per-date window reader.

A :class:`_DateReader` holds paths and numbers only (no open handles), so the dask graph pickles
for process-based workers. Each call reads one window of one date into a band-last float32 buffer,
either straight from the file's tiles (:mod:`._tiff_tiles`, for plain deflate/uncompressed layouts)
or through GDAL (every other layout, warped reads and quality masks).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ...errors import StackReadError
from ._numba import decode_bands, decode_bands_last
from ._tiff_tiles import TileLayout, read_window, tile_layout


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
    tiles: TileLayout | None = None  # set when the file's blocks can be read directly


def _read_header(path: Path, check_tiles: bool = True) -> _Header:
    import rasterio
    from rasterio.errors import RasterioIOError

    try:
        with rasterio.open(path) as src:
            tiles = tile_layout(path, src) if check_tiles else None
            if check_tiles and tiles is None:
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
                tiles=tiles,
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
    tiles: TileLayout | None = None  # the file's block layout when it is read directly (never with warp)

    def __call__(self, window: tuple[int, int, int, int]) -> np.ndarray:
        row0, row1, col0, col1 = window
        try:
            has_nd = np.array([nd is not None and not (isinstance(nd, float) and math.isnan(nd)) for nd in self.nodata])
            nd_values = np.array([nd if ok else 0 for nd, ok in zip(self.nodata, has_nd)], dtype=np.float64)
            scales, offsets = np.asarray(self.scales, np.float64), np.asarray(self.offsets, np.float64)
            mask = None
            if self.tiles is not None and self.warp is None:
                out = read_window(self.tiles, self.path, self.band_indexes, window, scales, offsets, nd_values,
                                  has_nd).transpose(2, 0, 1)
            else:
                out, mask = self._read_gdal(window, scales, offsets, nd_values, has_nd)
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

    def _read_gdal(self, window: tuple, scales: np.ndarray, offsets: np.ndarray, nd_values: np.ndarray,
                   has_nd: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Reflectance (band, y, x) of a window read through GDAL, and the warp's validity mask (or None)."""
        raw, mask = self._read(self.path, self.band_indexes, window, self.warp_resampling, band_last=True)
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

