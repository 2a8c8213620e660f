"""A zlib (RFC 1950/1951) stream encoder tuned for shuffled floating-point chunks.

Used by :mod:`unmix.io._chunked_writer` to compress NetCDF chunks in parallel dask tasks. At levels
1-3 each byte plane of a shuffled chunk is either stored (near-random low-order bytes of full
precision floats) or coded as one Huffman block, and runs of 16 or more equal bytes in a plane
(no-data fill, exact zeros, a repeated exponent) become matches at distance 1; there is no general
search for repeats. That part is compiled with numba (:mod:`unmix.io._deflate_numba`, releases the
GIL) and does the byte shuffle, the statistics, the coding and the Adler-32 checksum in one call
with per-thread buffers. At levels 4-9 CPython's zlib does the work. Every result is a valid zlib
stream that any inflate decodes.

References
----------
Deutsch, P. (1996). DEFLATE Compressed Data Format Specification version 1.3. RFC 1951.
https://doi.org/10.17487/RFC1951
"""

from __future__ import annotations

import sys
import threading
import zlib

import numpy as np

from ._adler32_numba import adler32
from ._deflate_numba import MIN_RUN, capacity, deflate_planes, encode_words, shuffle_words

__all__ = ["zlib_stream", "zlib_chunk", "shuffle_bytes"]

_STORE_ABOVE = 0.97
#: Bytes taken from each of 4 places of a plane for that trial.
_SAMPLE = 4096
#: Largest payload of one stored deflate block (RFC 1951, 3.2.4) [bytes].
_STORED_MAX = 65535
#: Unsigned integer types whose bytes the compiled shuffle reads (little-endian machines only).
_WORDS = {1: np.uint8, 2: np.uint16, 4: np.uint32, 8: np.uint64}

_THREAD = threading.local()


def _scratch(n_bytes: int, n_planes: int) -> tuple[np.ndarray, np.ndarray]:
    """This thread's shuffle and output buffers, grown to fit (dask worker threads encode side by side)."""
    need = ((n_bytes + 7) // 8, int(capacity(n_bytes, n_planes, MIN_RUN)))
    have = getattr(_THREAD, "buffers", None)
    if have is None or have[0].size < need[0] or have[1].size < need[1]:
        have = _THREAD.buffers = (np.empty(need[0], np.uint64), np.empty(need[1], np.uint64))
    return have


def _words(values: np.ndarray) -> tuple[np.ndarray, int, int, int] | None:
    """``values`` as rows of unsigned words of their item size: ``(flat, rows, cols, stride)`` as
    :func:`shuffle_words` reads them, or None when that cannot be done (item size not 1/2/4/8 or a
    big-endian machine). A chunk cut from a larger block (rows of contiguous values, evenly spaced)
    is read in place; other layouts are copied once into this thread's staging buffer."""
    values = np.asarray(values)
    word = _WORDS.get(values.dtype.itemsize)
    if word is None or sys.byteorder != "little" or values.dtype.hasobject:
        return None
    item = values.dtype.itemsize
    if values.flags.c_contiguous:
        flat = values.reshape(-1).view(word)
        return flat, 1, flat.size, flat.size
    as_words = values.view(word)  # same item size: a view whatever the strides
    dims = [(n, s) for n, s in zip(as_words.shape, as_words.strides) if n != 1]
    if len(dims) == 2 and dims[1][1] == item and dims[0][1] % item == 0 and dims[0][1] >= dims[1][0] * item:
        (rows, row_step), (cols, _) = dims
        stride = row_step // item
        flat = np.lib.stride_tricks.as_strided(as_words, shape=((rows - 1) * stride + cols,), strides=(item,))
        return flat, rows, cols, stride
    staging = getattr(_THREAD, "staging", None)
    if staging is None or staging.nbytes < values.nbytes:
        staging = _THREAD.staging = np.empty((values.nbytes + 7) // 8, np.uint64)
    flat = staging.view(word)[:values.size]
    np.copyto(flat.reshape(values.shape), as_words)
    return flat, 1, flat.size, flat.size


def shuffle_bytes(values: np.ndarray) -> np.ndarray:
    """HDF5's shuffle filter: the first bytes of all values, then all second bytes, and so on.

    Parameters
    ----------
    values : ndarray
        Any fixed-size dtype, any shape (read in C order).

    Returns
    -------
    (itemsize, values.size) uint8 ndarray
        Byte plane ``p`` holds byte ``p`` (in memory order) of every value.

    Examples
    --------
    >>> shuffle_bytes(np.array([1, 2], dtype="<u2"))
    array([[1, 2],
           [0, 0]], dtype=uint8)
    """
    values = np.asarray(values)
    layout = _words(values)
    size = values.dtype.itemsize
    if layout is None:
        return np.ascontiguousarray(np.ascontiguousarray(values).view(np.uint8).reshape(-1, size).T)
    out = np.empty(size * values.size, np.uint8)
    shuffle_words(*layout, size, out)
    return out.reshape(size, values.size)


def zlib_chunk(values: np.ndarray, level: int, shuffle: bool = True) -> bytes:
    """The zlib stream (RFC 1950) that HDF5's shuffle + deflate filters decode into ``values``.

    At levels 1-3 one compiled call shuffles the bytes (HDF5's shuffle filter), codes each byte
    plane as :func:`zlib_stream` does (runs of ``MIN_RUN`` or more equal bytes as matches at
    distance 1, the rest stored or Huffman coded), and computes the Adler-32 checksum. Level 1 codes a plane with
    Huffman only when that saves over 10 % (code from a sample of the plane), level 2 whenever it
    saves anything, level 3 with the code from the full histogram. Levels 4-9 give the shuffled
    planes to :func:`zlib_stream` (CPython's zlib).

    Parameters
    ----------
    values : ndarray
        One HDF5 chunk (full size), any shape and fixed-size dtype, stored in C order.
    level : int
        Deflate level 1-9.
    shuffle : bool
        Apply the shuffle filter first (False: deflate of the bytes as they are).

    Returns
    -------
    bytes
        ``zlib.decompress`` of it gives ``shuffle_bytes(values).tobytes()`` (or
        ``values.tobytes()`` without shuffle).

    References
    ----------
    Deutsch, P. (1996). DEFLATE compressed data format specification version 1.3. RFC 1951.
    https://doi.org/10.17487/RFC1951 ; Deutsch, P., Gailly, J.-L. (1996). ZLIB compressed data
    format specification version 3.3. RFC 1950. https://doi.org/10.17487/RFC1950

    Examples
    --------
    >>> import zlib, numpy as np
    >>> chunk = np.full((4, 64), np.nan, np.float32)
    >>> stream = zlib_chunk(chunk, 1)
    >>> zlib.decompress(stream) == shuffle_bytes(chunk).tobytes(), len(stream) < 60
    (True, True)
    """
    values = np.asarray(values)
    layout = _words(values) if level <= 3 else None
    size = values.dtype.itemsize
    if layout is not None:
        if not shuffle:  # the bytes as they are: one plane, rows of bytes
            flat, rows, cols, stride = layout
            layout, size = (flat.view(np.uint8), rows, cols * size, stride * size), 1
        shuffled64, out64 = _scratch(values.nbytes, size)
        n_bytes = encode_words(*layout, size, max(level, 1), MIN_RUN, shuffled64, out64)
        return out64.view(np.uint8)[:n_bytes].tobytes()
    planes = shuffle_bytes(values) if shuffle else np.ascontiguousarray(values).reshape(-1).view(np.uint8)[None]
    return zlib_stream(planes, level)


def zlib_stream(segments: list[np.ndarray], level: int) -> bytes:
    """One zlib stream (RFC 1950) of the concatenated ``segments``, each coded the cheapest way.

    HDF5's deflate filter decodes any valid zlib stream, whatever choices the encoder made. The
    low-order byte planes of full-precision floats are close to random: deflate cannot shrink them,
    yet zlib spends most of its time searching them for matches. So each segment (byte plane) is
    coded on its own, the cheaper of two ways:

    * levels 1-3 (compiled): runs of ``MIN_RUN`` (16) or more equal bytes become matches at
      distance 1; the other bytes go into one dynamic-Huffman block of literals, or into *stored*
      blocks (a copy) when Huffman coding would not be smaller (at level 1: not over 10 %
      smaller; level 3 builds the code from the full histogram, 1-2 from a sample). For the
      sign/exponent plane of fractions this is both faster and smaller than zlib's level 1,
      which spends its time looking for repeats that full-precision floats do not have;
    * levels 4-9: zlib's match search at that level, after a trial on a 4 x 4 KiB sample; a plane
      that does not shrink below 97 % goes into stored blocks.

    Parameters
    ----------
    segments : list of 1-D uint8 ndarray, or (n_segments, n) uint8 ndarray
        Byte planes in stream order.
    level : int
        Deflate level 1-9.

    Returns
    -------
    bytes
        ``zlib.decompress`` of it gives ``b"".join(segments)``.

    References
    ----------
    Deutsch, P. (1996). DEFLATE compressed data format specification version 1.3. RFC 1951.
    https://doi.org/10.17487/RFC1951 ; Deutsch, P., Gailly, J.-L. (1996). ZLIB compressed data
    format specification version 3.3. RFC 1950. https://doi.org/10.17487/RFC1950

    Examples
    --------
    >>> import zlib, numpy as np
    >>> planes = [np.arange(1000, dtype=np.uint8), np.zeros(1000, np.uint8)]
    >>> zlib.decompress(zlib_stream(planes, 1)) == b"".join(p.tobytes() for p in planes)
    True
    """
    header = b"\x78\x01"  # CMF: deflate, 32 KiB window; FLG: check bits, no dictionary
    if len(segments) == 0:
        return header + b"\x03\x00" + (1).to_bytes(4, "big")  # one empty final block, fixed codes
    if level <= 3:
        if isinstance(segments, np.ndarray) and segments.ndim == 2 and segments.dtype == np.uint8:
            flat = np.ascontiguousarray(segments).reshape(-1)
            bounds = np.arange(segments.shape[0] + 1, dtype=np.int64) * segments.shape[1]
        else:
            parts = [np.ascontiguousarray(seg, dtype=np.uint8).reshape(-1) for seg in segments]
            flat = np.concatenate(parts)
            bounds = np.concatenate([[0], np.cumsum([part.size for part in parts])]).astype(np.int64)
        words = np.zeros((flat.size + 7) // 8, np.uint64)  # the coder reads runs 8 bytes at a time
        words.view(np.uint8)[:flat.size] = flat
        out64 = np.empty(capacity(flat.size, bounds.size - 1, MIN_RUN), np.uint64)
        size = deflate_planes(words, flat.size, bounds, max(level, 1), MIN_RUN, out64)
        return out64.view(np.uint8)[:size].tobytes() + int(adler32(flat, 1)).to_bytes(4, "big")
    strategy = zlib.Z_DEFAULT_STRATEGY
    out = [header]
    checksum = 1
    last_index = len(segments) - 1
    for i, seg in enumerate(segments):
        seg = np.ascontiguousarray(seg, dtype=np.uint8).reshape(-1)
        data = memoryview(seg)
        checksum = zlib.adler32(data, checksum)
        last = i == last_index
        n = seg.size
        if n > 4 * _SAMPLE:
            step = (n - _SAMPLE) // 3
            sample = b"".join(data[k * step:k * step + _SAMPLE] for k in range(4))
        else:
            sample = data
        trial = zlib.compressobj(level, zlib.DEFLATED, -15, 8, strategy)
        shrinks = len(trial.compress(sample)) + len(trial.flush()) < _STORE_ABOVE * len(sample)
        if shrinks:
            coder = zlib.compressobj(level, zlib.DEFLATED, -15, 8, strategy)
            out.append(coder.compress(data))
            # a full flush ends byte-aligned without the final-block bit, so the next segment follows
            out.append(coder.flush(zlib.Z_FINISH if last else zlib.Z_FULL_FLUSH))
        else:
            starts = range(0, max(n, 1), _STORED_MAX)
            for j, start in enumerate(starts):
                piece = data[start:start + _STORED_MAX]
                final = last and j == len(starts) - 1
                size = len(piece)
                out.append(bytes((1 if final else 0, size & 0xFF, size >> 8, ~size & 0xFF, (~size >> 8) & 0xFF)))
                out.append(piece)
    out.append(checksum.to_bytes(4, "big"))
    return b"".join(out)


