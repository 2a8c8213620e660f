"""Reading one window of one date of an archive: every scene of the date, warped onto the target grid.

A :class:`DateReader` holds scenes, the grid and settings (paths and numbers, no open handles), so
the dask graph pickles for process-based workers. For each window it reads, per scene,

* each band file: directly when the file lies on the target grid (same CRS and pixel size, whole-
  pixel offset), else through GDAL's warper (:class:`rasterio.vrt.WarpedVRT`), averaging by area when
  the source pixels are finer than the target's (10 or 20 m onto 30 m) and nearest otherwise;
  the stored fill value is left out of the averages;
* the quality band, decoded to "masked" at its own resolution, then resampled as the share of each
  target pixel covered by masked source pixels (area average); a target pixel is masked when that
  share exceeds ``mask_share`` (default 0: any masked source pixel);

and mosaics the scenes of the date: the first scene that has a valid value for a pixel gives it.
"""

from __future__ import annotations

import contextlib
import functools
import math
import os
from dataclasses import dataclass

import numpy as np

from ...errors import StackReadError
from ..stack._tiff_blocks import BlockLayout, block_layout, read_window
from ..stack.files import FileIdentity
from ..stack.geotiff import gdal_message
from ._numba import nested_mean, nested_share
from .grid import TargetGrid
from .quality import masked
from .scenes import Scene

__all__ = ["DateReader"]


@dataclass(frozen=True)
class SourceFile:
    """One file of a scene as recorded when the archive was opened: its header, version and block layout."""

    crs_wkt: str | None
    transform: tuple  # 6 GDAL-order affine terms
    width: int
    height: int
    identity: FileIdentity | None  # None for files inside tar archives or on web servers
    layout: BlockLayout | None  # plain GeoTIFF layouts are decoded directly (tifffile); others by GDAL

    @property
    def resolution(self) -> float:
        return abs(self.transform[0])

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        a, _, c, _, e, f = self.transform
        xs, ys = (c, c + a * self.width), (f, f + e * self.height)
        return min(xs), min(ys), max(xs), max(ys)


def source_file(gdal_path: str) -> SourceFile:
    """Read the header of a scene file once: georeferencing, version and layout (rasterio errors pass)."""
    import rasterio

    with rasterio.open(gdal_path) as src:
        header = (src.crs.to_wkt() if src.crs is not None else None, tuple(src.transform)[:6], src.width, src.height)
        if gdal_path.startswith("/vsi"):
            return SourceFile(*header, None, None)
        with open(gdal_path, "rb") as fh:
            identity = FileIdentity.of(os.fstat(fh.fileno()))
            layout = block_layout(gdal_path, fh, src) if src.count == 1 else None
    return SourceFile(*header, identity, layout)


@functools.lru_cache(maxsize=16)
def _crs(wkt: str):
    """The rasterio CRS of a WKT string, parsed once per process (compared for every band and window)."""
    from rasterio.crs import CRS

    return CRS.from_wkt(wkt)


@dataclass(frozen=True)
class DateReader:
    """Reads windows of one date: ``scenes`` (one per footprint), their band names in stack order."""

    date: str
    scenes: tuple  # of Scene
    bands: tuple  # per scene: the sensor band names in the stack's (role) order
    grid: TargetGrid
    masks: tuple  # per scene: the quality names masked
    mask_share: float = 0.0
    files: tuple = ()  # (GDAL path, SourceFile) of every file, recorded when the archive was opened

    def __call__(self, window: tuple[int, int, int, int]) -> np.ndarray:
        row0, row1, col0, col1 = window
        h, w = row1 - row0, col1 - col0
        out = np.full((len(self.bands[0]), h, w), np.nan, dtype=np.float32)
        todo = np.ones((h, w), dtype=bool)  # pixels no scene has given yet
        files = dict(self.files)
        for scene, bands, names in zip(self.scenes, self.bands, self.masks):
            if not todo.any():
                break
            try:
                values, ok = self._scene_window(scene, bands, names, window, files)
            except StackReadError:
                raise
            except Exception as exc:  # rasterio/GDAL raise several types for damaged files
                raise StackReadError(f"reading {scene.product_id} (date {self.date}), rows {row0}-{row1}, columns "
                                     f"{col0}-{col1} failed: {gdal_message(exc)}; the product may be damaged") from None
            if len(self.scenes) == 1:  # nothing to mosaic
                return values[np.newaxis]
            take = todo & ok
            out[:, take] = values[:, take]
            todo &= ~ok
        return out[np.newaxis]

    def _scene_window(self, scene: Scene, bands: tuple, names: tuple, window: tuple,
                      files: dict) -> tuple[np.ndarray, np.ndarray]:
        """Reflectance (band, y, x) of one scene on the window, and where it is valid (y, x)."""
        import rasterio

        row0, row1, col0, col1 = window
        h, w = row1 - row0, col1 - col0
        values = np.empty((len(bands), h, w), dtype=np.float32)
        ok = np.ones((h, w), dtype=bool)
        for k, band in enumerate(bands):
            path = scene.bands[band]
            with _checked(path, files.get(path)), rasterio.open(path) as src:
                raw, valid = _read_on_grid(src, self.grid, window, scene.nodata, _direct(path, files))
            values[k] = raw * np.float32(scene.scale[band]) + np.float32(scene.offset[band])
            ok &= valid
        if scene.quality is not None:
            path = scene.quality
            with _checked(path, files.get(path)), rasterio.open(path) as src:
                ok &= ~_masked_on_grid(src, self.grid, window, scene.quality_kind, names, self.mask_share,
                                       _direct(path, files))
        values[:, ~ok] = np.nan
        return values, ok


def _on_grid(src, grid: TargetGrid) -> tuple[int, int] | None:
    """(row, col) offset of the grid's origin in ``src`` pixels when ``src`` lies on the grid, else None."""
    if src.crs is None or src.crs != _crs(grid.crs_wkt):
        return None
    a, b, c, d, e, f = tuple(src.transform)[:6]
    ga, gb, gc, gd, ge, gf = grid.transform
    if b or d or gb or gd or not math.isclose(a, ga, rel_tol=1e-9) or not math.isclose(e, ge, rel_tol=1e-9):
        return None
    col, row = (gc - c) / a, (gf - f) / e
    if abs(col - round(col)) > 1e-6 or abs(row - round(row)) > 1e-6:
        return None
    return round(row), round(col)


@contextlib.contextmanager
def _checked(path: str, recorded: SourceFile | None):
    """The file under ``path`` must be the version recorded when the archive was opened, before and after."""
    if recorded is None or recorded.identity is None:
        yield
        return
    recorded.identity.check(os.stat(path), path)
    yield
    recorded.identity.check(os.stat(path), path)


def _direct(path: str, files: dict) -> _Direct | None:
    """The direct block reader of ``path`` when its layout was found plain at opening, else None (GDAL)."""
    recorded = files.get(path)
    return _Direct(path, recorded) if recorded is not None and recorded.layout is not None else None


@dataclass(frozen=True)
class _Direct:
    """A band file read from its own blocks (tifffile + imagecodecs), fill values as NaN."""

    path: str
    file: SourceFile

    def read(self, row0: int, col0: int, h: int, w: int, nodata: float) -> np.ndarray:
        """float32 values of a window that may reach outside the file (NaN there and for fill values)."""
        layout = self.file.layout
        out = np.full((h, w), np.nan, np.float32)
        r0, c0 = max(row0, 0), max(col0, 0)
        r1, c1 = min(row0 + h, layout.height), min(col0 + w, layout.width)
        if r1 > r0 and c1 > c0:
            one = np.ones(1)
            part = read_window(layout, self.path, self.file.identity, (1,), (r0, r1, c0, c1), one, 0 * one,
                               np.array([nodata], np.float64), np.array([True]))
            out[r0 - row0:r1 - row0, c0 - col0:c1 - col0] = part[:, :, 0]
        return out


def _read_on_grid(src, grid: TargetGrid, window: tuple, nodata: float,
                  direct: _Direct | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Stored values of band 1 of ``src`` on the grid window as float32, and where they are not fill."""
    from affine import Affine
    from rasterio.enums import Resampling
    from rasterio.vrt import WarpedVRT
    from rasterio.windows import Window

    row0, row1, col0, col1 = window
    h, w = row1 - row0, col1 - col0
    offset = _on_grid(src, grid)
    if offset is not None:
        r, c = offset
        if direct is not None:
            raw = direct.read(row0 + r, col0 + c, h, w, nodata)
            valid = np.isfinite(raw)
            raw[~valid] = np.float32(nodata)
            return raw, valid
        raw = _read_part(src, row0 + r, col0 + c, h, w, nodata, "float32")
        return raw, raw != np.float32(nodata)
    nested = _nested_grid(src, grid)
    if nested is not None:  # finer pixels nested in the grid's (10 or 20 m onto 30 m): exact area means in numpy
        part, r_off, c_off = _source_part(src, nested, window, nodata, src.dtypes[0], direct)
        mean = np.empty((row1 - row0, col1 - col0), np.float32)
        valid = np.empty(mean.shape, np.bool_)
        nested_mean(part, nested[0], nested[1], r_off, c_off, part.dtype.type(nodata), mean, valid)
        return mean, valid
    finer = max(abs(src.transform.a), abs(src.transform.e)) < 0.99 * min(grid.resolution)
    with WarpedVRT(src, crs=_crs(grid.crs_wkt), transform=Affine(*grid.transform), width=grid.width,
                   height=grid.height, resampling=Resampling.average if finer else Resampling.nearest,
                   src_nodata=nodata, nodata=nodata, dtype="float32") as vrt:  # no rounding of averages
        raw = vrt.read(1, window=Window(col0, row0, w, h), out_dtype="float32")
        valid = vrt.read_masks(1, window=Window(col0, row0, w, h)) > 0
    return raw, valid & (raw != np.float32(nodata))


def _masked_on_grid(src, grid: TargetGrid, window: tuple, kind: str, names: tuple, share: float,
                    direct: _Direct | None = None) -> np.ndarray:
    """True where more than ``share`` of a target pixel is covered by masked quality pixels (or no quality)."""
    from affine import Affine
    from rasterio.enums import Resampling
    from rasterio.warp import reproject, transform_bounds
    from rasterio.windows import Window, from_bounds

    row0, row1, col0, col1 = window
    h, w = row1 - row0, col1 - col0
    offset = _on_grid(src, grid)
    if offset is not None:
        r, c = offset
        qa, nodata = _read_quality(src, row0 + r, col0 + c, h, w, direct)
        return masked(kind, qa, names) | nodata | _outside(src, r + row0, c + col0, h, w)
    nested = _nested_grid(src, grid)
    if nested is not None:  # share of each target pixel covered by masked quality pixels, exactly
        (r_off, c_off), (s_r0, s_c0, s_h, s_w) = _source_span(nested, window)
        qa, nodata = _read_quality(src, s_r0, s_c0, s_h, s_w)
        bad = masked(kind, qa, names) | nodata | _outside(src, s_r0, s_c0, s_h, s_w)
        cover = np.empty((row1 - row0, col1 - col0), np.float64)
        nested_share(bad.view(np.uint8), nested[0], nested[1], r_off, c_off, cover)
        return cover > share if share > 0 else cover > 1e-6
    dst_t = Affine(*grid.window_transform(row0, col0))
    left, top = dst_t @ (0, 0)
    right, bottom = dst_t @ (w, h)
    bounds = transform_bounds(_crs(grid.crs_wkt), src.crs, min(left, right), min(top, bottom),
                              max(left, right), max(top, bottom), densify_pts=21)
    fb = from_bounds(*bounds, transform=src.transform)
    c0, r0 = math.floor(fb.col_off) - 1, math.floor(fb.row_off) - 1  # a pixel of margin
    win = Window(c0, r0, math.ceil(fb.col_off + fb.width) + 1 - c0, math.ceil(fb.row_off + fb.height) + 1 - r0)
    qa, nodata = _read_quality(src, int(win.row_off), int(win.col_off), int(win.height), int(win.width))
    bad = (masked(kind, qa, names) | nodata).astype(np.float32)
    # pixels outside the file count as masked (a scene covers only part of the grid)
    bad[_outside(src, int(win.row_off), int(win.col_off), bad.shape[0], bad.shape[1])] = 1.0
    cover = np.zeros((h, w), dtype=np.float32)
    src_t = src.transform @ Affine.translation(win.col_off, win.row_off)
    reproject(bad, cover, src_transform=src_t, src_crs=src.crs, dst_transform=dst_t,
              dst_crs=_crs(grid.crs_wkt), resampling=Resampling.average)
    return cover > share if share > 0 else cover > 1e-6


def _nested_grid(src, grid: TargetGrid) -> tuple[int, int, int, int] | None:
    """(up, down, row offset, col offset) when ``src`` pixels nest exactly in a finer common grid of the target.

    Source pixel size s and target size t (same CRS, north-up) with t = down x g and s = up x g for a
    common size g (e.g. 20 m and 30 m: g = 10, up = 2, down = 3), and the target origin on that common
    grid (offsets in g-pixels). Then a target pixel's area average is the mean of down x down common
    pixels, each taking the value of the source pixel it lies in. None when the grids do not nest or the
    source is not finer.
    """
    from fractions import Fraction

    if src.crs is None or src.crs != _crs(grid.crs_wkt):
        return None
    a, b, c, d, e, f = tuple(src.transform)[:6]
    ga, gb, gc, gd, ge, gf = grid.transform
    if b or d or gb or gd or a <= 0 or e >= 0 or ga <= 0 or ge >= 0 or not math.isclose(a, -e) or \
            not math.isclose(ga, -ge) or a >= 0.99 * ga:
        return None
    ratio = Fraction(ga / a).limit_denominator(8)  # t / s = down / up
    if abs(float(ratio) - ga / a) > 1e-9 or ratio.numerator > 64:
        return None
    down, up = ratio.numerator, ratio.denominator
    g = ga / down
    col, row = (gc - c) / g, (f - gf) / g
    if abs(col - round(col)) > 1e-6 or abs(row - round(row)) > 1e-6:
        return None
    return up, down, round(row), round(col)


def _source_span(nested: tuple, window: tuple) -> tuple[tuple[int, int], tuple[int, int, int, int]]:
    """((row, col) offset of the window on the fine grid within the source span, (row0, col0, h, w) of
    the source pixels under a target window)."""
    up, down, orow, ocol = nested
    row0, row1, col0, col1 = window
    f_r0, f_c0 = orow + row0 * down, ocol + col0 * down
    f_r1, f_c1 = orow + row1 * down, ocol + col1 * down
    s_r0, s_c0 = f_r0 // up, f_c0 // up
    s_r1, s_c1 = -(-f_r1 // up), -(-f_c1 // up)
    return (f_r0 - s_r0 * up, f_c0 - s_c0 * up), (s_r0, s_c0, s_r1 - s_r0, s_c1 - s_c0)


def _source_part(src, nested: tuple, window: tuple, fill, dtype, direct: _Direct | None = None
                 ) -> tuple[np.ndarray, int, int]:
    """The source pixels under a target window, and the window's offset on the fine grid within them.

    Plain layouts are decoded from their own blocks (libdeflate through imagecodecs: about twice GDAL's
    rate on 10 m bands; fill values come back as NaN), others through GDAL in their native type.
    """
    (r_off, c_off), (s_r0, s_c0, s_h, s_w) = _source_span(nested, window)
    if direct is not None:
        return direct.read(s_r0, s_c0, s_h, s_w, fill), r_off, c_off
    return _read_part(src, s_r0, s_c0, s_h, s_w, fill, dtype), r_off, c_off


def _read_part(src, row0: int, col0: int, h: int, w: int, fill: float, dtype: str) -> np.ndarray:
    """Band 1 of ``src`` on a window that may reach outside the file; outside pixels get ``fill``.

    (rasterio's ``boundless`` reads go through a VRT and are slower; this reads the inside part only.)
    """
    from rasterio.windows import Window

    out = np.full((h, w), fill, dtype=dtype)
    r0, c0 = max(row0, 0), max(col0, 0)
    r1, c1 = min(row0 + h, src.height), min(col0 + w, src.width)
    if r1 > r0 and c1 > c0:
        out[r0 - row0:r1 - row0, c0 - col0:c1 - col0] = src.read(1, window=Window(c0, r0, c1 - c0, r1 - r0),
                                                                 out_dtype=dtype)
    return out


def _read_quality(src, row0: int, col0: int, h: int, w: int, direct: _Direct | None = None
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Quality values of a window (0 outside the file) and where they are the band's own nodata."""
    nodata = src.nodata
    has_nodata = nodata is not None and np.isfinite(nodata)
    if direct is not None:
        values = direct.read(row0, col0, h, w, float(nodata) if has_nodata else np.nan)
        bad = np.isnan(values)
        return np.where(bad, 0, values).astype(np.int64), bad
    qa = _read_part(src, row0, col0, h, w, 0, src.dtypes[0])
    bad = qa == nodata if has_nodata else np.zeros(qa.shape, bool)
    return qa, bad


def _outside(src, row0: int, col0: int, h: int, w: int) -> np.ndarray:
    rows = np.arange(row0, row0 + h)[:, None]
    cols = np.arange(col0, col0 + w)[None, :]
    return (rows < 0) | (rows >= src.height) | (cols < 0) | (cols >= src.width)
