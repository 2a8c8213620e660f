"""Compiled core of the zlib-stream encoder (:mod:`unmix.io._deflate`): byte shuffle, runs, and raw
deflate (RFC 1951) of byte planes as literal + run blocks. Huffman codes: :mod:`._huffman_numba`;
checksum: :mod:`._adler32_numba`.

A plane is cut into literal stretches and *runs* (at least ``MIN_RUN`` equal bytes: the planes of
no-data fill, exact zeros, a repeated exponent). A run is coded as its first byte and matches at
distance 1 (RFC 1951, 3.2.5), whatever else the plane gets; literal stretches are either copied
into stored blocks (near-random planes) or coded with one dynamic Huffman code per plane. There is
no general match search. The bit writer fills 64-bit words; hot loops are written out without
calls (a numba call that takes arrays costs more than coding a byte).

References
----------
Deutsch, P. (1996). DEFLATE Compressed Data Format Specification version 1.3. RFC 1951.
https://doi.org/10.17487/RFC1951 ; Deutsch, P., Gailly, J.-L. (1996). ZLIB compressed data format
specification version 3.3. RFC 1950. https://doi.org/10.17487/RFC1950
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ._adler32_numba import adler32
from ._huffman_numba import huffman_lengths, reversed_codes

#: Shortest run of one byte value coded as matches (in a stored plane a run costs ~8 bytes of headers;
#: :func:`find_runs` needs 15 or more).
MIN_RUN = 16
_EIGHT = np.uint64(8)
_LOW8 = np.uint64(0xFF)
_CL_ORDER = np.array([16, 17, 18, 0, 8, 7, 9, 6, 10, 5, 11, 4, 12, 3, 13, 2, 14, 1, 15], dtype=np.int64)
# match lengths 3..258 -> length symbol (257..285), its base length and extra bits (RFC 1951, 3.2.5)
_LEN_BASE = np.array([3, 4, 5, 6, 7, 8, 9, 10, 11, 13, 15, 17, 19, 23, 27, 31, 35, 43, 51, 59, 67, 83, 99, 115,
                      131, 163, 195, 227, 258], dtype=np.int64)
_LEN_EXTRA = np.array([0, 0, 0, 0, 0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3, 4, 4, 4, 4, 5, 5, 5, 5, 0],
                      dtype=np.int64)
_LEN_SYM = np.zeros(259, np.int64)
for _i in range(29):
    _LEN_SYM[_LEN_BASE[_i]:(_LEN_BASE[_i + 1] if _i < 28 else 259)] = _i
_LEN_SYM[258] = 28  # 258 has its own symbol (285), not 284 with extra bits 31
# fixed Huffman code lengths of the literal/length alphabet (RFC 1951, 3.2.6)
_FIXED_LENGTHS = np.array([8] * 144 + [9] * 112 + [7] * 24 + [8] * 8, dtype=np.int64)


@njit(cache=True, nogil=True)
def shuffle_words(flat, rows, cols, stride, size, out):
    """HDF5's shuffle filter: byte ``p`` of value ``k`` goes to ``out[p * n + k]``.

    The values are ``rows`` rows of ``cols`` unsigned words starting every ``stride`` words of the
    contiguous ``flat`` (a chunk cut from a larger block is read in place); bytes are taken in
    memory order of a little-endian machine. Per-row views keep the loops vectorisable.
    """
    n = rows * cols
    for i in range(rows):
        src = flat[i * stride:i * stride + cols]
        at = i * cols
        if size == 1:
            a = out[at:at + cols]
            for j in range(cols):
                a[j] = np.uint8(src[j] & 0xFF)
        elif size == 2:
            a, b = out[at:at + cols], out[n + at:n + at + cols]
            for j in range(cols):
                w = src[j]
                a[j] = np.uint8(w & 0xFF)
                b[j] = np.uint8((w >> 8) & 0xFF)
        else:  # 4 or 8 bytes: four planes per pass
            for group in range(size // 4):
                shift = 32 * group
                base = 4 * group * n + at
                a, b = out[base:base + cols], out[base + n:base + n + cols]
                c, d = out[base + 2 * n:base + 2 * n + cols], out[base + 3 * n:base + 3 * n + cols]
                for j in range(cols):
                    w = src[j] >> shift
                    a[j] = np.uint8(w & 0xFF)
                    b[j] = np.uint8((w >> 8) & 0xFF)
                    c[j] = np.uint8((w >> 16) & 0xFF)
                    d[j] = np.uint8((w >> 24) & 0xFF)


@njit(cache=True, nogil=True)
def find_runs(data, data64, first, n, min_run):
    """Maximal runs of one byte value of ``data[first:first + n]`` at least ``min_run`` (>= 15) long.

    ``data64`` is the same buffer seen as uint64 words. A run of 15 or more bytes holds an aligned
    word of 8 equal bytes, so only words are scanned until one is uniform; the run is then followed
    byte by byte backwards and a word at a time forwards. Returns plane-local ``(starts, lengths)``.
    """
    ones = np.uint64(0x0101010101010101)
    starts = np.empty(n // max(min_run, 1) + 1, np.int64)
    lengths = np.empty_like(starts)
    count = 0
    end = first + n
    done = first  # bytes before this belong to a run already seen
    wi = (first + 7) >> 3
    while wi < end >> 3:
        w = data64[wi]
        v = w & np.uint64(0xFF)
        if w != v * ones:
            wi += 1
            continue
        byte = data[wi * 8]
        lo = wi * 8
        while lo > done and data[lo - 1] == byte:
            lo -= 1
        hi = wi * 8 + 8
        while hi < end and data[hi] == byte:
            if hi & 7 == 0 and hi + 8 <= end and data64[hi >> 3] == w:
                hi += 8
            else:
                hi += 1
        if hi - lo >= min_run:
            starts[count] = lo - first
            lengths[count] = hi - lo
            count += 1
        done = hi
        wi = (hi + 7) >> 3
    return starts[:count], lengths[:count]


# -- bit writer: ``acc`` holds ``nbits`` (< 64) pending bits; whole words go to ``out64[wpos]`` ----

@njit(cache=True, nogil=True, inline="always")
def _put(out64, wpos, acc, nbits, value, n):
    """Append the ``n`` (<= 32) low bits of ``value`` to the LSB-first bit stream (RFC 1951, 3.1.1)."""
    v = np.uint64(value)
    acc |= v << np.uint64(nbits)
    nbits += n
    if nbits >= 64:
        out64[wpos] = acc
        wpos += 1
        nbits -= 64
        acc = v >> np.uint64(n - nbits) if nbits > 0 else np.uint64(0)
    return wpos, acc, nbits


@njit(cache=True, nogil=True)
def _code_plane(data, first, n, run_starts, run_lens, huffman, codes, lengths, out8, out64, wpos, acc, nbits):
    """Blocks of one plane after its first block header: with ``huffman``, literals coded with
    ``codes``/``lengths`` and runs as matches in the same block; otherwise literals in stored blocks
    and each run as a small fixed-code block (``codes``/``lengths`` are then the fixed ones).

    Bits are written inline (no calls in the loops: a numba call that takes arrays costs more than
    coding a byte). Returns the writer state ``(wpos, acc, nbits)``.
    """
    ucodes = codes.astype(np.uint64)
    ulengths = lengths.astype(np.uint64)
    table = (ucodes << _EIGHT) | ulengths  # code and length of a literal in one word: one load
    # runs: a fixed-code block header before (stored planes), distance code 0 (distance 1), end of block after
    pre_v, pre_n = (np.uint64(0), np.uint64(0)) if huffman else (np.uint64(1 << 1), np.uint64(3))
    dist_n = np.uint64(1) if huffman else np.uint64(5)
    post_v, post_n = (np.uint64(0), np.uint64(0)) if huffman else (ucodes[256], ulengths[256])
    bits = np.uint64(nbits)
    start = first
    for r in range(run_starts.size + 1):
        stop = first + (run_starts[r] + 1 if r < run_starts.size else n)
        if huffman:
            k = start
            while k < stop:
                if k + 4 <= stop:  # four codes of <= 15 bits make one value of <= 60 bits
                    e0, e1, e2, e3 = table[data[k]], table[data[k + 1]], table[data[k + 2]], table[data[k + 3]]
                    l0, l1, l2 = e0 & _LOW8, e1 & _LOW8, e2 & _LOW8
                    v = (e0 >> _EIGHT) | ((e1 >> _EIGHT) << l0) | ((e2 >> _EIGHT) << (l0 + l1)) \
                        | ((e3 >> _EIGHT) << (l0 + l1 + l2))
                    length = l0 + l1 + l2 + (e3 & _LOW8)
                    k += 4
                else:
                    e0 = table[data[k]]
                    v = e0 >> _EIGHT
                    length = e0 & _LOW8
                    k += 1
                acc |= v << bits
                bits += length
                if bits >= np.uint64(64):
                    out64[wpos] = acc
                    wpos += 1
                    bits -= np.uint64(64)
                    acc = (v >> (length - bits)) if bits > np.uint64(0) else np.uint64(0)
        else:
            while start < stop:  # stored blocks (RFC 1951, 3.2.4), written here rather than by calls
                size = min(65535, stop - start)
                bits += np.uint64(3)  # BFINAL 0, BTYPE 00: stored; then pad to a byte boundary
                bits = (bits + np.uint64(7)) & ~np.uint64(7)
                if bits >= np.uint64(64):
                    out64[wpos] = acc
                    wpos += 1
                    bits -= np.uint64(64)
                    acc = np.uint64(0)
                out64[wpos] = acc
                pos = wpos * 8 + np.int64(bits >> np.uint64(3))
                out8[pos] = size & 0xFF
                out8[pos + 1] = (size >> 8) & 0xFF
                out8[pos + 2] = ~size & 0xFF
                out8[pos + 3] = (~size >> 8) & 0xFF
                dst = out8[pos + 4:pos + 4 + size]
                part = data[start:start + size]
                for i in range(size):  # a loop over views compiles to a block copy
                    dst[i] = part[i]
                pos += 4 + size
                wpos = pos >> 3
                bits = np.uint64(8 * (pos & 7))
                acc = out64[wpos] & ((np.uint64(1) << bits) - np.uint64(1))  # the bytes already there
                start += size
        if r == run_starts.size:
            break
        remaining = run_lens[r] - 1
        byte = data[stop - 1]
        phase = 0
        while True:  # tokens of the run: [block header], matches of <= 258 bytes, 0-2 literals, [end of block]
            if phase == 0:
                phase = 1
                v, length = pre_v, pre_n
            elif remaining >= 3:
                m = min(remaining, 258)
                if 0 < remaining - m < 3:
                    m = remaining - 3
                i = _LEN_SYM[m]
                sym = 257 + i
                extra = np.uint64(_LEN_EXTRA[i])
                v = ucodes[sym] | (np.uint64(m - _LEN_BASE[i]) << ulengths[sym])  # distance code 0 adds 0 bits
                length = ulengths[sym] + extra + dist_n
                remaining -= m
            elif remaining > 0:
                v, length = ucodes[byte], ulengths[byte]
                remaining -= 1
            elif phase == 1:
                phase = 2
                v, length = post_v, post_n
            else:
                break
            if length == np.uint64(0):
                continue
            acc |= v << bits
            bits += length
            if bits >= np.uint64(64):
                out64[wpos] = acc
                wpos += 1
                bits -= np.uint64(64)
                acc = (v >> (length - bits)) if bits > np.uint64(0) else np.uint64(0)
        start = first + run_starts[r] + run_lens[r]
    return wpos, acc, np.int64(bits)


@njit(cache=True, nogil=True)
def _dynamic_header(out64, wpos, acc, nbits, lengths):
    """Dynamic block header (RFC 1951, 3.2.7): 286 literal/length and 2 distance code lengths,
    written with a flat code-length code (symbols 0-15 at 4 bits each)."""
    wpos, acc, nbits = _put(out64, wpos, acc, nbits, 2 << 1, 3)  # BFINAL 0, BTYPE 10: dynamic codes
    wpos, acc, nbits = _put(out64, wpos, acc, nbits, 29 | (1 << 5) | (15 << 10), 14)  # HLIT, HDIST, HCLEN
    for i in range(19):
        wpos, acc, nbits = _put(out64, wpos, acc, nbits, 0 if _CL_ORDER[i] >= 16 else 4, 3)
    for s in range(288):
        length = lengths[s] if s < 286 else 1  # distance codes 0 (distance 1) and 1 (unused): 1 bit each
        r = ((length & 1) << 3) | ((length & 2) << 1) | ((length & 4) >> 1) | ((length & 8) >> 3)
        wpos, acc, nbits = _put(out64, wpos, acc, nbits, r, 4)
    return wpos, acc, nbits


@njit(cache=True, nogil=True)
def _run_symbols(run_lens, freq):
    """Add the length symbols that the runs ``run_lens`` take to ``freq``. Returns their extra and
    distance bits in a dynamic block, and their whole cost in the fixed-code blocks of a stored plane."""
    extra = 0
    fixed = 0
    for r in range(run_lens.size):
        length = run_lens[r] - 1
        fixed += 3 + 7 + 48  # block header, end of block, the stored block header that follows
        while length >= 3:
            m = min(length, 258)
            if 0 < length - m < 3:
                m = length - 3
            i = _LEN_SYM[m]
            freq[257 + i] += 1
            extra += _LEN_EXTRA[i] + 1  # + the 1-bit distance code
            fixed += _FIXED_LENGTHS[257 + i] + _LEN_EXTRA[i] + 5
            length -= m
        fixed += 9 * length
    return extra, fixed


@njit(cache=True, nogil=True)
def _literal_histogram(data, first, n, run_starts, run_lens, step, freq):
    """Count every ``step``-th byte of the plane outside its matched stretches; returns the count."""
    count = 0
    start = 0
    for r in range(run_starts.size + 1):
        stop = run_starts[r] + 1 if r < run_starts.size else n
        for k in range((start + step - 1) // step * step, stop, step):
            freq[data[first + k]] += 1
            count += 1
        if r < run_starts.size:
            start = run_starts[r] + run_lens[r]
    return count


@njit(cache=True, nogil=True)
def deflate_planes(data64, size, bounds, level, min_run, out64):
    """zlib header and raw deflate blocks of the planes ``data[bounds[p]:bounds[p + 1]]`` (``data``:
    the first ``size`` bytes of the words ``data64``), ending
    with an empty final block. Runs of one byte value at least ``min_run`` long are coded as
    matches. Level 1 codes a plane's literals with Huffman only when the estimate saves over 10 %
    (code from a sample), level 2 when it saves anything, level 3 as 2 with the code from a full
    histogram. Returns the number of bytes written to ``out64``.
    """
    out8 = out64.view(np.uint8)
    data = data64.view(np.uint8)[:size]
    fixed_codes = reversed_codes(_FIXED_LENGTHS)
    wpos, acc, nbits = 0, np.uint64(0), 0
    wpos, acc, nbits = _put(out64, wpos, acc, nbits, 0x78 | (0x01 << 8), 16)  # deflate, 32 KiB window
    for p in range(bounds.size - 1):
        first = bounds[p]
        n = bounds[p + 1] - first
        if n == 0:
            continue
        run_starts, run_lens = find_runs(data, data64, first, n, min_run)
        n_lit = n - (np.sum(run_lens) - run_lens.size)
        step = 1 if level >= 3 else max(1, n_lit // 16384)
        freq = np.zeros(286, np.int64)
        count = _literal_histogram(data, first, n, run_starts, run_lens, step, freq)
        if count == 0:  # literals only between sampled positions: count them all
            step = 1
            count = _literal_histogram(data, first, n, run_starts, run_lens, step, freq)
        if step > 1:
            for s in range(256):  # scale the sample to the plane; every byte stays codable
                freq[s] = max(1, (freq[s] * n_lit + count // 2) // count)
        freq[256] = 1
        extra, fixed_bits = _run_symbols(run_lens, freq)
        stored_bits = 8 * n_lit + 48 * (n_lit // 65535 + 1) + fixed_bits
        limit = 0.9 * stored_bits if level <= 1 else stored_bits
        total = np.sum(freq[:256])
        entropy_bits = 0.0  # no prefix code beats the entropy (Shannon): skip building one that cannot pay
        for s in range(256):
            if freq[s] > 0:
                entropy_bits -= freq[s] * np.log2(freq[s] / total)
        use_huffman = entropy_bits < limit
        if use_huffman:
            lengths = huffman_lengths(freq, 15)
            huffman_bits = 3 + 14 + 57 + 288 * 4 + extra
            for s in range(286):
                huffman_bits += freq[s] * lengths[s]
            use_huffman = huffman_bits < limit
        if use_huffman:
            saved = (wpos, acc, nbits)
            codes = reversed_codes(lengths)
            wpos, acc, nbits = _dynamic_header(out64, wpos, acc, nbits, lengths)
            wpos, acc, nbits = _code_plane(data, first, n, run_starts, run_lens, True, codes, lengths, out8, out64,
                                           wpos, acc, nbits)
            wpos, acc, nbits = _put(out64, wpos, acc, nbits, codes[256], lengths[256])
            if 64 * (wpos - saved[0]) + nbits - saved[2] > stored_bits:  # the sample misled: store instead
                wpos, acc, nbits = saved
                use_huffman = False
        if not use_huffman:
            wpos, acc, nbits = _code_plane(data, first, n, run_starts, run_lens, False, fixed_codes, _FIXED_LENGTHS,
                                           out8, out64, wpos, acc, nbits)
    wpos, acc, nbits = _put(out64, wpos, acc, nbits, 1 | (1 << 1), 3)  # final block, fixed codes: only
    wpos, acc, nbits = _put(out64, wpos, acc, nbits, fixed_codes[256], 7)  # the end-of-block code
    wpos, acc, nbits = _put(out64, wpos, acc, nbits, 0, (64 - nbits) & 7)
    out64[wpos] = acc
    return wpos * 8 + nbits // 8


@njit(cache=True, nogil=True)
def capacity(n_bytes, n_planes, min_run):
    """Words of output that :func:`deflate_planes` and the checksum can need: a Huffman plane is
    abandoned once it outgrows stored blocks, so it never takes over 15/8 of its size; a run of
    ``min_run`` or more bytes costs at most 16 bytes of block headers."""
    return (2 * n_bytes + 16 * (n_bytes // max(min_run, 1) + 1) + n_planes * (200 + 5 * (n_bytes // 65535 + 2))) // 8 + 8


@njit(cache=True, nogil=True)
def encode_words(flat, rows, cols, stride, size, level, min_run, shuffled64, out64):
    """zlib stream of the values laid out as in :func:`shuffle_words` (one uint of ``size`` bytes
    each) after HDF5's byte shuffle.

    ``shuffled64`` (at least ``n * size`` bytes) and ``out64`` (:func:`capacity` words) are scratch
    buffers, reused between calls so that fresh memory is not faulted in for every chunk. Returns
    the number of bytes of the stream at the start of ``out64``.
    """
    n = rows * cols
    shuffled = shuffled64.view(np.uint8)[:n * size]
    shuffle_words(flat, rows, cols, stride, size, shuffled)
    pos = deflate_planes(shuffled64, n * size, np.arange(size + 1) * n, level, min_run, out64)
    out8 = out64.view(np.uint8)
    check = adler32(shuffled, 1)
    for i in range(4):
        out8[pos + i] = (check >> (24 - 8 * i)) & 0xFF
    return pos + 4
