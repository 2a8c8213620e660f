"""Direct reads of plain GeoTIFF layouts: the file's own tiles (or strips), inflated and decoded in one pass.

For the common layout of reflectance stacks (tiled or stripped, deflate or no compression,
horizontal or floating-point predictor, little-endian, integer or float32 samples, pixel- or
band-interleaved) a window is read without GDAL's block cache: the tiles overlapping the window
are read with ``os.pread``, inflated with libdeflate (the ``deflate`` package, which releases the
GIL), and one compiled pass (:mod:`._numba`) undoes the predictor, applies nodata, scale and offset
and writes straight into the band-last float32 window. Only the tiles of one window are held at a
time. Values are bit for bit those of GDAL's read followed by :func:`._numba.decode_bands_last`.

Which path a file takes is decided once, when the stack is opened (:func:`tile_layout`): any
layout not listed above gives ``None`` and the file is read through GDAL.

The layout is read from the first image file directory (IFD) of the TIFF, classic or BigTIFF,
following the TIFF 6.0 specification (Adobe, 1992; tags 256-339) and the BigTIFF extension, and is
cross-checked against what GDAL reports for the file.
"""

from __future__ import annotations

import math
import os
import struct
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ...errors import StackReadError
from ._numba import tile_floating, tile_horizontal, tile_plain

__all__ = ["TileLayout", "tile_layout", "read_window"]

# TIFF tags (TIFF 6.0, section 8 and the tiling extension in section 15)
_WIDTH, _HEIGHT, _BITS, _COMPRESSION = 256, 257, 258, 259
_STRIP_OFFSETS, _SAMPLES, _ROWS_PER_STRIP, _STRIP_COUNTS = 273, 277, 278, 279
_PLANAR, _PREDICTOR, _TILE_WIDTH, _TILE_LENGTH = 284, 317, 322, 323
_TILE_OFFSETS, _TILE_COUNTS, _SAMPLE_FORMAT = 324, 325, 339
#: field type -> (struct code, size [bytes]); BYTE, SHORT, LONG, LONG8 and their signed twins
_FIELD_TYPES = {1: ("B", 1), 3: ("H", 2), 4: ("I", 4), 16: ("Q", 8), 6: ("b", 1), 8: ("h", 2), 9: ("i", 4), 17: ("q", 8)}
#: compression codes read directly: none, deflate (Adobe) and the older deflate code
_DEFLATE = (8, 32946)
_SAMPLE_DTYPES = {(1, 8): "uint8", (2, 8): "int8", (1, 16): "uint16", (2, 16): "int16",
                  (1, 32): "uint32", (2, 32): "int32", (3, 32): "float32"}


@dataclass(frozen=True)
class TileLayout:
    """Where the blocks of one GeoTIFF lie and how they are stored (plain numbers, pickles cheaply)."""

    height: int
    width: int
    block_h: int  # tile height or rows per strip [pixels]
    block_w: int  # tile width, or the image width for strips [pixels]
    strips: bool
    samples: int  # samples per pixel (the file's band count)
    planar: bool  # True: band-interleaved (one block per band), False: pixel-interleaved
    dtype: str
    compression: int  # 1 none, 8 / 32946 deflate
    predictor: int  # 1 none, 2 horizontal differencing, 3 floating point
    offsets: tuple  # byte offset of each block, band-major for planar files
    counts: tuple  # byte count of each block

    @property
    def n_cols(self) -> int:
        return math.ceil(self.width / self.block_w)

    @property
    def n_rows(self) -> int:
        return math.ceil(self.height / self.block_h)


def _read_ifd(fh: Any) -> dict[int, tuple] | None:
    """Tags of the first IFD of a little-endian TIFF / BigTIFF as tuples of ints; None otherwise."""
    head = fh.read(16)
    if len(head) < 8 or head[:2] != b"II":
        return None  # big-endian or not a TIFF: GDAL reads it
    version = struct.unpack_from("<H", head, 2)[0]
    if version == 42:
        ifd, count_fmt, entry_fmt, inline = struct.unpack_from("<I", head, 4)[0], "<H", "<HHI", 4
    elif version == 43 and len(head) == 16:
        ifd, count_fmt, entry_fmt, inline = struct.unpack_from("<Q", head, 8)[0], "<Q", "<HHQ", 8
    else:
        return None
    fh.seek(ifd)
    n_size = struct.calcsize(count_fmt)
    (n_entries,) = struct.unpack(count_fmt, fh.read(n_size))
    entry_size = struct.calcsize(entry_fmt) + inline
    table = fh.read(n_entries * entry_size)
    if len(table) < n_entries * entry_size:
        raise ValueError("the directory of tags is cut short")
    tags: dict[int, tuple] = {}
    for k in range(n_entries):
        base = k * entry_size
        tag, ftype, count = struct.unpack_from(entry_fmt, table, base)
        if ftype not in _FIELD_TYPES:
            continue  # ASCII, rational and double tags are not needed here
        code, size = _FIELD_TYPES[ftype]
        nbytes = count * size
        if nbytes <= inline:
            raw = table[base + struct.calcsize(entry_fmt): base + struct.calcsize(entry_fmt) + nbytes]
        else:
            (where,) = struct.unpack_from("<I" if inline == 4 else "<Q", table, base + struct.calcsize(entry_fmt))
            fh.seek(where)
            raw = fh.read(nbytes)
            if len(raw) < nbytes:
                raise ValueError(f"tag {tag} points beyond the end of the file")
        tags[tag] = tuple(np.frombuffer(raw, dtype="<" + code).tolist())
    return tags


def tile_layout(path: Path, src: Any) -> TileLayout | None:
    """The layout of ``path`` if it can be read directly, else None (the file is read through GDAL).

    ``src`` is the file opened with rasterio; its size, band count, data type and block shape must
    agree with the TIFF directory. Raises :class:`StackReadError` when a block lies beyond the end
    of the file (a truncated copy), naming the block and the byte counts.
    """
    if src.driver != "GTiff" or len(set(src.dtypes)) != 1:
        return None
    with open(path, "rb") as fh:
        tags = _read_ifd(fh)
    if tags is None:
        return None

    def first(tag: int, default: int | None = None) -> Any:
        return tags.get(tag, (default,))[0]

    samples = first(_SAMPLES, 1)
    bits = set(tags.get(_BITS, (1,)))
    formats = set(tags.get(_SAMPLE_FORMAT, (1,)))
    if len(bits) != 1 or len(formats) != 1:
        return None
    dtype = _SAMPLE_DTYPES.get((formats.pop(), bits.pop()))
    compression, predictor = first(_COMPRESSION, 1), first(_PREDICTOR, 1)
    planar = first(_PLANAR, 1) == 2
    tiled = _TILE_OFFSETS in tags
    height, width = first(_HEIGHT), first(_WIDTH)
    if tiled:
        block_h, block_w = first(_TILE_LENGTH), first(_TILE_WIDTH)
        offsets, counts = tags.get(_TILE_OFFSETS), tags.get(_TILE_COUNTS)
    else:
        block_h, block_w = min(first(_ROWS_PER_STRIP, height), height), width
        offsets, counts = tags.get(_STRIP_OFFSETS), tags.get(_STRIP_COUNTS)
    if (
        dtype is None
        or dtype != src.dtypes[0]
        or compression not in (1, *_DEFLATE)
        or predictor not in ((1, 2, 3) if dtype == "float32" else (1, 2))
        or samples != src.count
        or (height, width) != (src.height, src.width)
        or (block_h, block_w) != tuple(src.block_shapes[0])
        or offsets is None
        or counts is None
    ):
        return None
    layout = TileLayout(
        height=height, width=width, block_h=block_h, block_w=block_w, strips=not tiled, samples=samples,
        planar=planar, dtype=dtype, compression=compression, predictor=predictor,
        offsets=tuple(offsets), counts=tuple(counts),
    )
    n_blocks = layout.n_rows * layout.n_cols * (samples if planar else 1)
    if len(offsets) != n_blocks or len(counts) != n_blocks or 0 in offsets or 0 in counts:
        return None  # sparse file (missing blocks) or an unexpected directory: GDAL fills in
    size = path.stat().st_size
    ends = np.asarray(offsets, np.int64) + np.asarray(counts, np.int64)
    bad = np.flatnonzero(ends > size)
    if bad.size:
        band, k = divmod(int(bad[0]), layout.n_rows * layout.n_cols) if planar else (0, int(bad[0]))
        row, col = divmod(k, layout.n_cols)
        raise StackReadError(
            f"{path} is truncated or damaged: {'strip' if layout.strips else 'tile'} ({row}, {col}) of band "
            f"{band + 1} ends at byte {int(ends[bad[0]])} but the file has {size} bytes; copy or download it again"
        )
    return layout


def read_window(
    layout: TileLayout, path: str, band_indexes: tuple, window: tuple[int, int, int, int],
    scales: np.ndarray, offsets: np.ndarray, nodata: np.ndarray, has_nodata: np.ndarray,
) -> np.ndarray:
    """Reflectance (y, x, band) float32 of ``window`` = (row0, row1, col0, col1) read from the blocks.

    ``band_indexes`` are 1-based; ``scales``/``offsets``/``nodata`` (float64) and ``has_nodata``
    (bool) hold one value per selected band. Raises ValueError / OSError for a damaged block (the
    caller names the file and the date).
    """
    row0, row1, col0, col1 = window
    nsel = len(band_indexes)
    out = np.empty((row1 - row0, col1 - col0, nsel), dtype=np.float32)
    value_dtype = np.dtype(layout.dtype)
    unsigned = np.dtype(f"u{value_dtype.itemsize}")
    nsamp = 1 if layout.planar else layout.samples
    row_len = layout.block_w * nsamp  # samples per block row
    row_bytes = row_len * value_dtype.itemsize
    s32 = scales.astype(np.float32)
    o32 = offsets.astype(np.float32)
    if layout.planar:  # one block per band: each selected band is its own pass
        passes = [(b - 1, np.zeros(1, np.int64), np.array([k], np.int64)) for k, b in enumerate(band_indexes)]
    else:
        passes = [(0, np.asarray(band_indexes, np.int64) - 1, np.arange(nsel, dtype=np.int64))]
    scratch = np.empty(row_len, value_dtype)  # one predictor-undone block row
    scratch_bytes = np.empty(row_bytes, np.uint8) if layout.predictor == 3 else np.empty(0, np.uint8)
    n_per_band = layout.n_rows * layout.n_cols
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_BINARY", 0))  # O_BINARY: Windows
    try:
        for i in range(row0 // layout.block_h, (row1 - 1) // layout.block_h + 1):
            top = i * layout.block_h
            rows_in_block = min(layout.block_h, layout.height - top) if layout.strips else layout.block_h
            r_lo, r_hi = max(row0, top) - top, min(row1, top + layout.block_h) - top
            for j in range(col0 // layout.block_w, (col1 - 1) // layout.block_w + 1):
                left = j * layout.block_w
                c_lo, c_hi = max(col0, left) - left, min(col1, left + layout.block_w) - left
                for plane, sel, dest in passes:
                    k = plane * n_per_band + i * layout.n_cols + j
                    data = _block_bytes(fd, layout, k, rows_in_block * row_bytes, layout.block_h * row_bytes,
                                        (i, j, plane))
                    o_r, o_c = top + r_lo - row0, left + c_lo - col0
                    if layout.predictor == 1:
                        tile_plain(np.frombuffer(data, value_dtype), row_len, nsamp, r_lo, r_hi, c_lo, c_hi, sel, dest,
                                   out, o_r, o_c, s32, o32, nodata, has_nodata)
                    elif layout.predictor == 2:
                        tile_horizontal(np.frombuffer(data, unsigned), scratch.view(unsigned), scratch, row_len, nsamp,
                                        r_lo, r_hi, c_lo, c_hi, sel, dest, out, o_r, o_c, s32, o32, nodata, has_nodata)
                    else:
                        tile_floating(np.frombuffer(data, np.uint8), scratch_bytes, scratch.view(np.uint32), scratch,
                                      row_len, nsamp, r_lo, r_hi, c_lo, c_hi, sel, dest, out, o_r, o_c, s32, o32,
                                      nodata, has_nodata)
    finally:
        os.close(fd)
    return out


def _block_bytes(fd: int, layout: TileLayout, k: int, expected: int, full: int, where: tuple) -> bytes:
    """The decompressed bytes of block ``k``, at least ``expected`` long (at most ``full``, the bytes of a
    whole block; a file's last strip may be stored shorter), or ValueError naming the block."""
    offset, count = layout.offsets[k], layout.counts[k]
    i, j, plane = where
    name = f"{'strip' if layout.strips else 'tile'} ({i}, {j}) of band {plane + 1}"
    data = _pread(fd, count, offset)
    if len(data) < count:
        raise ValueError(f"{name} is cut short ({len(data)} of {count} bytes at byte {offset})")
    if layout.compression != 1:
        import deflate

        try:
            data = deflate.zlib_decompress(data, full)
        except deflate.DeflateError:
            raise ValueError(f"{name} does not inflate (corrupt deflate stream at byte {offset})") from None
    if len(data) < expected:
        raise ValueError(f"{name} holds {len(data)} bytes, {expected} expected")
    return data


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
