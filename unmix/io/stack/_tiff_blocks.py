"""Direct reads of plain GeoTIFF layouts: tifffile locates and decodes the blocks, one compiled pass decodes values.

For the common layout of reflectance stacks a window is read without GDAL: the tiles (or strips)
overlapping the window are read with ``os.pread`` from a handle whose identity (size, mtime,
inode, device) is checked against the one recorded when the stack was opened, decompressed and
un-predicted by tifffile's own segment decoder (``TiffPage.decode``, imagecodecs' libdeflate / LZW
codecs and predictors), and one compiled pass (:func:`._numba.decode_block`) applies nodata, scale
and offset straight into the band-last float32 window. Only the blocks of one window are held at a
time. Values are bit for bit those of GDAL's read followed by :func:`._numba.decode_bands_last`.

Which files take this path is decided when the stack is opened (:func:`block_layout`), from a
whitelist of what the path reproduces exactly; everything else (any other compression, predictor,
sample format or bit depth, big-endian files, FillOrder 2, an orientation other than top-left,
reduced-resolution or palette images, missing blocks, a tag outside :data:`PLAIN_TAGS`, a directory
that tifffile parses only with complaints) gives ``None`` and is read through GDAL.
"""

from __future__ import annotations

import logging
import math
import os
import threading
from dataclasses import dataclass
from typing import Any, BinaryIO

import numpy as np

from ...errors import StackReadError
from ._numba import decode_block
from .files import FileIdentity

__all__ = ["BlockLayout", "PLAIN_TAGS", "block_layout", "read_window"]

#: Tags that do not change how stored values are read (TIFF 6.0 baseline and extension tags, Adobe
#: 1992, sections 8 and 15; GeoTIFF 1.1, OGC 19-008r4; GDAL's GDAL_METADATA 42112 and GDAL_NODATA 42113).
PLAIN_TAGS = frozenset({
    254, 256, 257, 258, 259, 262, 266, 269, 270, 271, 272, 273, 274, 277, 278, 279, 280, 281, 282, 283, 284,
    285, 296, 305, 306, 315, 316, 317, 322, 323, 324, 325, 338, 339, 340, 341, 33432,
    33550, 33922, 34264, 34735, 34736, 34737,
    42112, 42113,
})
#: Compressions decoded here: none, LZW, deflate (Adobe code 8 and the older 32946).
_COMPRESSIONS = (1, 5, 8, 32946)
#: (SampleFormat, BitsPerSample) -> dtype
_DTYPES = {(1, 8): "uint8", (2, 8): "int8", (1, 16): "uint16", (2, 16): "int16", (1, 32): "uint32",
           (2, 32): "int32", (3, 32): "float32", (3, 64): "float64"}


class _NotPlain(Exception):
    """The file is not a layout read here (it goes to GDAL)."""


@dataclass(frozen=True)
class BlockLayout:
    """How the blocks of one GeoTIFF are stored (plain numbers, pickles cheaply)."""

    height: int
    width: int
    block_h: int  # tile height or rows per strip [pixels]
    block_w: int  # tile width, or the image width for strips [pixels]
    strips: bool
    samples: int  # samples per pixel (the file's band count)
    planar: bool  # True: band-interleaved (one block per band), False: pixel-interleaved
    dtype: str
    compression: int
    predictor: int

    @property
    def n_cols(self) -> int:
        return math.ceil(self.width / self.block_w)

    @property
    def n_rows(self) -> int:
        return math.ceil(self.height / self.block_h)


_LOG_LOCK = threading.Lock()  # one header at a time borrows tifffile's logger


class _Capture(logging.Handler):
    def __init__(self) -> None:
        super().__init__(logging.WARNING)
        self.messages: list[str] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.messages.append(record.getMessage())


def block_layout(path: Any, fh: BinaryIO, src: Any) -> BlockLayout | None:
    """The layout of the file open as ``fh`` if it is read directly, else None (it is read through GDAL).

    ``src`` is the same file opened with rasterio; its size, band count, data type and block shape
    must agree with tifffile's reading of the first directory. Raises :class:`StackReadError` when
    a block lies beyond the end of the file (a truncated copy), naming the block and the byte counts.
    """
    import tifffile

    if src.driver != "GTiff" or len(set(src.dtypes)) != 1:
        return None
    log = logging.getLogger("tifffile")
    capture = _Capture()
    with _LOG_LOCK:
        propagate, level = log.propagate, log.level
        log.addHandler(capture)
        log.setLevel(logging.WARNING)
        log.propagate = False  # tifffile's complaints decide the path here; they are not the user's concern
        try:
            fh.seek(0)
            with tifffile.TiffFile(fh) as tif:
                if tif.byteorder != "<":
                    return None  # big-endian: GDAL
                layout, offsets, counts = _plain_layout(tif.pages.first, src)
        except Exception:  # noqa: BLE001 - _NotPlain, or anything tifffile cannot parse: GDAL's to read or refuse
            return None
        finally:
            log.removeHandler(capture)
            log.setLevel(level)
            log.propagate = propagate
    if capture.messages:
        return None
    size = os.fstat(fh.fileno()).st_size
    for k, (offset, count) in enumerate(zip(offsets, counts)):
        if offset + count > size:
            raise StackReadError(
                f"{path} is truncated or damaged: {_block_name(layout, k)} ends at byte {offset + count} "
                f"but the file has {size} bytes; copy or download it again"
            )
    return layout


def _plain_layout(page: Any, src: Any) -> tuple[BlockLayout, tuple, tuple]:
    """The layout of a tifffile page from its raw tags, or _NotPlain; cross-checked with tifffile and GDAL."""
    tags = {tag.code: tag for tag in page.tags.values()}
    if not set(tags) <= PLAIN_TAGS:
        raise _NotPlain

    def scalar(code: int, default: int | None = None) -> int:
        tag = tags.get(code)
        if tag is None:
            if default is None:
                raise _NotPlain
            return default
        if tag.count != 1:
            raise _NotPlain  # libtiff ignores a tag of the wrong count: let GDAL decide
        return int(tag.value)

    def values(code: int) -> tuple:
        value = tags[code].value
        return tuple(int(v) for v in value) if isinstance(value, tuple) else (int(value),)

    samples = scalar(277, 1)
    per_sample = []
    for code, default in ((258, 1), (339, 1)):
        vals = values(code) if code in tags else (default,) * samples
        if len(vals) != samples or len(set(vals)) != 1:
            raise _NotPlain
        per_sample.append(vals[0])
    dtype = _DTYPES.get((per_sample[1], per_sample[0]))
    compression, predictor = scalar(259, 1), scalar(317, 1)
    planar = scalar(284, 1)
    if (
        dtype is None
        or compression not in _COMPRESSIONS
        or predictor not in ((1, 3) if dtype.startswith("float") else (1, 2))
        or scalar(254, 0) != 0  # a reduced-resolution or other secondary image
        or scalar(262, 1) not in (1, 2)  # BlackIsZero, RGB: values as stored
        or scalar(266, 1) != 1  # FillOrder 2 (bits stored lowest first)
        or scalar(274, 1) != 1  # rows not stored top to bottom, left to right
        or planar not in (1, 2)
    ):
        raise _NotPlain
    height, width = scalar(257), scalar(256)
    tiled = bool({322, 323, 324, 325} & set(tags))
    if tiled:
        if {273, 278, 279} & set(tags):
            raise _NotPlain
        block_h, block_w = scalar(323), scalar(322)
        offsets, counts = values(324), values(325)
    else:
        block_h, block_w = min(scalar(278, height), height), width
        offsets, counts = values(273), values(279)
    if min(height, width, block_h, block_w) < 1:
        raise _NotPlain
    layout = BlockLayout(height=height, width=width, block_h=block_h, block_w=block_w, strips=not tiled,
                         samples=samples, planar=planar == 2, dtype=dtype, compression=compression, predictor=predictor)
    n_blocks = layout.n_rows * layout.n_cols * (samples if layout.planar else 1)
    if len(offsets) != n_blocks or len(counts) != n_blocks or 0 in offsets or 0 in counts:
        raise _NotPlain  # missing blocks (GDAL fills them in) or a directory that does not add up
    if (
        layout != _page_layout(page)
        or tuple(int(v) for v in page.dataoffsets) != offsets
        or src.dtypes[0] != dtype
        or (src.count, src.height, src.width) != (samples, height, width)
        or tuple(src.block_shapes[0]) != (block_h, block_w)
    ):
        raise _NotPlain
    return layout, offsets, counts


def _page_layout(page: Any) -> BlockLayout:
    """The layout as tifffile's decoder sees it (it must be the one read from the tags)."""
    return BlockLayout(
        height=int(page.imagelength), width=int(page.imagewidth),
        block_h=int(page.tilelength if page.is_tiled else min(page.rowsperstrip, page.imagelength)),
        block_w=int(page.tilewidth if page.is_tiled else page.imagewidth), strips=not page.is_tiled,
        samples=int(page.samplesperpixel), planar=int(page.planarconfig) == 2, dtype=str(np.dtype(page.dtype)),
        compression=int(page.compression), predictor=int(page.predictor),
    )


def _block_name(layout: BlockLayout, k: int) -> str:
    band, k = divmod(k, layout.n_rows * layout.n_cols) if layout.planar else (0, k)
    row, col = divmod(k, layout.n_cols)
    return f"{'strip' if layout.strips else 'tile'} ({row}, {col}) of band {band + 1}"


def read_window(
    layout: BlockLayout, path: str, identity: FileIdentity, band_indexes: tuple, window: tuple[int, int, int, int],
    scales: np.ndarray, offsets: np.ndarray, nodata: np.ndarray, has_nodata: np.ndarray,
) -> np.ndarray:
    """Reflectance (y, x, band) float32 of ``window`` = (row0, row1, col0, col1) read from the blocks.

    ``band_indexes`` are 1-based; ``scales``/``offsets``/``nodata`` (float64) and ``has_nodata``
    (bool) hold one value per selected band. Raises :class:`StackReadError` when the file is not
    the version recorded in ``identity``, ValueError / OSError for a damaged block (the caller
    names the file and the date).
    """
    import tifffile

    row0, row1, col0, col1 = window
    nsel = len(band_indexes)
    out = np.empty((row1 - row0, col1 - col0, nsel), dtype=np.float32)
    nsamp = 1 if layout.planar else layout.samples
    row_len = layout.block_w * nsamp  # samples per block row
    s32, o32 = scales.astype(np.float32), offsets.astype(np.float32)
    if layout.planar:  # one block per band: each selected band is its own pass
        passes = [(b - 1, np.zeros(1, np.int64), np.array([k], np.int64)) for k, b in enumerate(band_indexes)]
    else:
        passes = [(0, np.asarray(band_indexes, np.int64) - 1, np.arange(nsel, dtype=np.int64))]
    n_per_band = layout.n_rows * layout.n_cols
    with open(path, "rb") as fh:
        fd = fh.fileno()
        identity.check(os.fstat(fd), path)
        with tifffile.TiffFile(fh) as tif:
            page = tif.pages.first
            if _page_layout(page) != layout:  # cannot happen for the same version; never misread
                raise StackReadError(f"{path} changed its layout after the stack was opened; re-run")
            decode, block_offsets, block_counts = page.decode, page.dataoffsets, page.databytecounts
            for i in range(row0 // layout.block_h, (row1 - 1) // layout.block_h + 1):
                top = i * layout.block_h
                rows = min(layout.block_h, layout.height - top) if layout.strips else layout.block_h
                r_lo, r_hi = max(row0, top) - top, min(row1, top + layout.block_h) - top
                for j in range(col0 // layout.block_w, (col1 - 1) // layout.block_w + 1):
                    left = j * layout.block_w
                    c_lo, c_hi = max(col0, left) - left, min(col1, left + layout.block_w) - left
                    for plane, sel, dest in passes:
                        k = plane * n_per_band + i * layout.n_cols + j
                        count, where = int(block_counts[k]), int(block_offsets[k])
                        data = _pread(fd, count, where)
                        if len(data) < count:
                            raise ValueError(f"{_block_name(layout, k)} is cut short ({len(data)} of {count} bytes "
                                             f"at byte {where})")
                        block = decode(data, k)[0]
                        expected = (1, rows, layout.block_w, nsamp)
                        if block is None or block.shape != expected:
                            raise ValueError(f"{_block_name(layout, k)} decodes to "
                                             f"{None if block is None else block.shape} values, {expected} expected")
                        decode_block(np.ascontiguousarray(block).reshape(-1), row_len, nsamp, r_lo, r_hi, c_lo, c_hi,
                                     sel, dest, out, top + r_lo - row0, left + c_lo - col0, s32, o32, nodata,
                                     has_nodata)
        identity.check(os.fstat(fd), path)  # the bytes read belong to the recorded version
    return out


def _pread(fd: int, count: int, offset: int) -> bytes:
    """``count`` bytes at ``offset`` (fewer only at the end of the file); each task has its own ``fd``."""
    if hasattr(os, "pread"):  # POSIX: no shared file position
        return os.pread(fd, count, offset)
    os.lseek(fd, offset, os.SEEK_SET)  # Windows has no pread; the descriptor is this task's alone
    parts, left = [], count
    while left > 0:
        piece = os.read(fd, left)
        if not piece:
            break
        parts.append(piece)
        left -= len(piece)
    return b"".join(parts)
