"""A zlib (RFC 1950/1951) stream encoder tuned for shuffled floating-point chunks.

Used by :mod:`unmix.io._chunked_writer` to compress NetCDF chunks in parallel dask tasks. At levels
1-3 each byte plane of a shuffled chunk is either stored (near-random low-order bytes of full
precision floats) or coded as one Huffman block without a search for repeats, compiled with numba
(releases the GIL); at levels 4-9 CPython's zlib does the work. Every result is a valid zlib stream
that any inflate decodes.

References
----------
Deutsch, P. (1996). DEFLATE Compressed Data Format Specification version 1.3. RFC 1951.
https://doi.org/10.17487/RFC1951
"""

from __future__ import annotations

import zlib

import numpy as np
from numba import njit

__all__ = ["zlib_stream"]

_STORE_ABOVE = 0.97
#: Bytes taken from each of 4 places of a plane for that trial.
_SAMPLE = 4096
#: Largest payload of one stored deflate block (RFC 1951, 3.2.4) [bytes].
_STORED_MAX = 65535


def zlib_stream(segments: list[np.ndarray], level: int) -> bytes:
    """One zlib stream (RFC 1950) of the concatenated ``segments``, each coded the cheapest way.

    HDF5's deflate filter decodes any valid zlib stream, whatever choices the encoder made. The
    low-order byte planes of full-precision floats are close to random: deflate cannot shrink them,
    yet zlib spends most of its time searching them for matches. So each segment (byte plane) is
    coded on its own, the cheaper of two ways:

    * levels 1-3: one dynamic-Huffman block of literals (no match search; compiled here), or
      *stored* blocks (a copy) when Huffman coding would not be smaller. For the sign/exponent
      plane of fractions this is both faster and smaller than zlib's level 1, which spends its
      time looking for repeats that full-precision floats do not have;
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
        n_seg = bounds.size - 1
        out = np.empty(flat.size + 5 * (flat.size // 65535 + 2 * n_seg) + 24, np.uint8)
        out[:2] = np.frombuffer(header, np.uint8)
        size = 2 + _deflate_literal_segments(flat, bounds, out[2:])
        out[size:size + 4] = np.frombuffer(zlib.adler32(flat).to_bytes(4, "big"), np.uint8)
        return out[:size + 4].tobytes()
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


# --------------------------------------------------------------------------------------------------
# literal-only deflate (levels 1-3): byte planes coded with one dynamic Huffman block each, compiled

_CL_ORDER = np.array([16, 17, 18, 0, 8, 7, 9, 6, 10, 5, 11, 4, 12, 3, 13, 2, 14, 1, 15], dtype=np.int64)


@njit(cache=True, nogil=True)
def _put(out, pos, acc, nbits, value, n):
    """Append the ``n`` low bits of ``value`` to the LSB-first bit stream (RFC 1951, 3.1.1)."""
    acc |= np.uint64(value) << np.uint64(nbits)
    nbits += n
    while nbits >= 8:
        out[pos] = np.uint8(acc & np.uint64(0xFF))
        acc >>= np.uint64(8)
        nbits -= 8
        pos += 1
    return pos, acc, nbits


@njit(cache=True, nogil=True)
def _huffman_lengths(freq, max_len):
    """Code lengths of a Huffman code for ``freq`` (0 = unused symbol), longest code <= ``max_len``.

    Frequencies are halved (keeping used symbols used) until the optimal code fits the limit, the
    usual way encoders bound code lengths; the code stays valid, a little less than optimal.
    """
    n = freq.size
    f = freq.astype(np.int64).copy()
    while True:
        weight = np.zeros(2 * n, np.int64)
        parent = np.full(2 * n, -1, np.int64)
        alive = np.zeros(2 * n, np.bool_)
        n_nodes = 0
        for i in range(n):
            if f[i] > 0:
                weight[i] = f[i]
                alive[i] = True
                n_nodes += 1
        lengths = np.zeros(n, np.int64)
        if n_nodes == 1:
            for i in range(n):
                if f[i] > 0:
                    lengths[i] = 1
            return lengths
        nxt = n
        for _ in range(n_nodes - 1):
            a = -1
            b = -1
            for j in range(nxt):
                if alive[j]:
                    if a < 0 or weight[j] < weight[a]:
                        b = a
                        a = j
                    elif b < 0 or weight[j] < weight[b]:
                        b = j
            alive[a] = False
            alive[b] = False
            weight[nxt] = weight[a] + weight[b]
            alive[nxt] = True
            parent[a] = nxt
            parent[b] = nxt
            nxt += 1
        longest = 0
        for i in range(n):
            if f[i] > 0:
                depth = 0
                node = i
                while parent[node] >= 0:
                    node = parent[node]
                    depth += 1
                lengths[i] = depth
                longest = max(longest, depth)
        if longest <= max_len:
            return lengths
        for i in range(n):
            if f[i] > 0:
                f[i] = (f[i] >> 1) | 1


@njit(cache=True, nogil=True)
def _reversed_codes(lengths):
    """Canonical Huffman codes of ``lengths`` (RFC 1951, 3.2.2), bit-reversed for LSB-first output."""
    bl_count = np.zeros(16, np.int64)
    for length in lengths:
        bl_count[length] += 1
    bl_count[0] = 0
    next_code = np.zeros(16, np.int64)
    code = 0
    for bits in range(1, 16):
        code = (code + bl_count[bits - 1]) << 1
        next_code[bits] = code
    codes = np.zeros(lengths.size, np.int64)
    for sym in range(lengths.size):
        length = lengths[sym]
        if length:
            c = next_code[length]
            next_code[length] += 1
            r = 0
            for _ in range(length):
                r = (r << 1) | (c & 1)
                c >>= 1
            codes[sym] = r
    return codes


@njit(cache=True, nogil=True)
def _deflate_literal_segments(data, bounds, out):
    """Raw deflate of ``data[bounds[i]:bounds[i + 1]]`` (uint8), each segment as one block.

    A row is coded as one dynamic-Huffman block of literals (no match search) or, when that
    would not be smaller, as stored blocks. Returns the number of bytes written to ``out``.
    """
    n_planes = bounds.size - 1
    pos = 0
    acc = np.uint64(0)
    nbits = 0
    for p in range(n_planes):
        final = 1 if p == n_planes - 1 else 0
        first = bounds[p]
        n = bounds[p + 1] - first
        n_stored = max(1, (n + 65534) // 65535)
        stored_bits = 8 * (n + 5 * n_stored) + 8
        # a histogram of every step-th byte tells near-random planes apart cheaply
        step = max(1, n // 32768)
        freq = np.zeros(257, np.int64)
        for k in range(first, first + n, step):
            freq[data[k]] += 1
        freq[256] = 1
        lengths = _huffman_lengths(freq, 15)
        sampled_bits = 0
        for s in range(256):
            sampled_bits += freq[s] * lengths[s]
        huffman_bits = stored_bits + 1
        if n > 0 and sampled_bits * step < 0.97 * 8 * n:
            if step > 1:
                freq[:] = 0
                for k in range(first, first + n):
                    freq[data[k]] += 1
                freq[256] = 1  # end of block
                lengths = _huffman_lengths(freq, 15)
            data_bits = 0
            for s in range(257):
                data_bits += freq[s] * lengths[s]
            # header: 3 + 14 bits, 19 x 3 bits of code-length code, 259 x 4 bits of code lengths
            huffman_bits = 3 + 14 + 19 * 3 + 259 * 4 + data_bits
        if huffman_bits < stored_bits:
            codes = _reversed_codes(lengths)
            pos, acc, nbits = _put(out, pos, acc, nbits, final, 1)
            pos, acc, nbits = _put(out, pos, acc, nbits, 2, 2)  # BTYPE 10: dynamic Huffman codes
            pos, acc, nbits = _put(out, pos, acc, nbits, 0, 5)  # HLIT: 257 literal/length codes
            pos, acc, nbits = _put(out, pos, acc, nbits, 1, 5)  # HDIST: 2 distance codes (unused)
            pos, acc, nbits = _put(out, pos, acc, nbits, 15, 4)  # HCLEN: all 19 code-length codes
            for i in range(19):  # code-length code: symbols 0-15 at 4 bits each, 16-18 unused
                pos, acc, nbits = _put(out, pos, acc, nbits, 0 if _CL_ORDER[i] >= 16 else 4, 3)
            for s in range(259):
                length = lengths[s] if s < 257 else 1
                r = ((length & 1) << 3) | ((length & 2) << 1) | ((length & 4) >> 1) | ((length & 8) >> 3)
                pos, acc, nbits = _put(out, pos, acc, nbits, r, 4)
            ucodes = codes.astype(np.uint64)
            for k in range(first, first + n):
                sym = data[k]
                acc |= ucodes[sym] << np.uint64(nbits)
                nbits += lengths[sym]
                if nbits >= 32:  # codes are at most 15 bits: flush 4 bytes at a time
                    out[pos] = np.uint8(acc & np.uint64(0xFF))
                    out[pos + 1] = np.uint8((acc >> np.uint64(8)) & np.uint64(0xFF))
                    out[pos + 2] = np.uint8((acc >> np.uint64(16)) & np.uint64(0xFF))
                    out[pos + 3] = np.uint8((acc >> np.uint64(24)) & np.uint64(0xFF))
                    acc >>= np.uint64(32)
                    nbits -= 32
                    pos += 4
            pos, acc, nbits = _put(out, pos, acc, nbits, codes[256], lengths[256])
        else:
            for b in range(n_stored):
                start = b * 65535
                size = min(65535, n - start)
                last = final if b == n_stored - 1 else 0
                pos, acc, nbits = _put(out, pos, acc, nbits, last, 1)
                pos, acc, nbits = _put(out, pos, acc, nbits, 0, 2)  # BTYPE 00: stored
                if nbits > 0:  # stored data starts on a byte boundary
                    pos, acc, nbits = _put(out, pos, acc, nbits, 0, 8 - nbits)
                out[pos] = size & 0xFF
                out[pos + 1] = size >> 8
                out[pos + 2] = (~size) & 0xFF
                out[pos + 3] = ((~size) >> 8) & 0xFF
                pos += 4
                out[pos:pos + size] = data[first + start:first + start + size]
                pos += size
    if nbits > 0:
        pos, acc, nbits = _put(out, pos, acc, nbits, 0, 8 - nbits)
    return pos
