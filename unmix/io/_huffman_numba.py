"""Huffman code lengths and canonical codes for the deflate encoder (:mod:`unmix.io._deflate`), compiled.

References
----------
Huffman, D. A. (1952). A method for the construction of minimum-redundancy codes. Proceedings of the
IRE 40(9), 1098-1101. https://doi.org/10.1109/JRPROC.1952.273898 ; Deutsch, P. (1996). DEFLATE
Compressed Data Format Specification version 1.3, section 3.2.2. RFC 1951.
https://doi.org/10.17487/RFC1951
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["huffman_lengths", "reversed_codes"]


@njit(cache=True, nogil=True)
def huffman_lengths(freq, max_len):
    """Code lengths of a Huffman code for ``freq`` (0 = unused symbol), longest code <= ``max_len``.

    Two-queue construction on the sorted counts (van Leeuwen 1976), O(n log n). Counts are halved
    (keeping used symbols used) until the optimal code fits the limit, the usual way encoders bound
    code lengths; the code stays valid, a little less than optimal.

    Parameters
    ----------
    freq : (n_symbols,) int ndarray
        Symbol counts; 0 = the symbol gets no code.
    max_len : int
        Longest code allowed [bits] (15 for deflate literals, RFC 1951, 3.2.7).

    Returns
    -------
    (n_symbols,) int64 ndarray
        Code length of each symbol [bits]; a lone used symbol gets 1 bit.

    References
    ----------
    Huffman, D. A. (1952). A method for the construction of minimum-redundancy codes. Proceedings of
    the IRE 40(9), 1098-1101. https://doi.org/10.1109/JRPROC.1952.273898 ; van Leeuwen, J. (1976).
    On the construction of Huffman trees. Proc. 3rd ICALP, 382-410.

    Examples
    --------
    >>> huffman_lengths(np.array([5, 1, 1, 2]), 15).tolist()
    [1, 3, 3, 2]
    """
    n = freq.size
    f = freq.astype(np.int64).copy()
    lengths = np.zeros(n, np.int64)
    used = np.nonzero(f > 0)[0]
    m = used.size
    if m == 0:
        return lengths
    if m == 1:
        lengths[used[0]] = 1
        return lengths
    while True:
        order = used[np.argsort(f[used], kind="mergesort")]
        weight = np.empty(2 * m - 1, np.int64)
        parent = np.empty(2 * m - 1, np.int64)
        for i in range(m):
            weight[i] = f[order[i]]
        leaf = 0
        inner = m
        for new in range(m, 2 * m - 1):
            pair = np.empty(2, np.int64)
            for t in range(2):
                if leaf < m and (inner >= new or weight[leaf] <= weight[inner]):
                    pair[t] = leaf
                    leaf += 1
                else:
                    pair[t] = inner
                    inner += 1
            weight[new] = weight[pair[0]] + weight[pair[1]]
            parent[pair[0]] = new
            parent[pair[1]] = new
        depth = np.zeros(2 * m - 1, np.int64)
        for node in range(2 * m - 3, -1, -1):  # parents are made after their children
            depth[node] = depth[parent[node]] + 1
        if depth[:m].max() <= max_len:
            for i in range(m):
                lengths[order[i]] = depth[i]
            return lengths
        for i in used:
            f[i] = (f[i] >> 1) | 1


@njit(cache=True, nogil=True)
def reversed_codes(lengths):
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
