"""The Adler-32 checksum of zlib streams (RFC 1950), compiled and vectorisable.

References
----------
Deutsch, P., Gailly, J.-L. (1996). ZLIB compressed data format specification version 3.3. RFC 1950.
https://doi.org/10.17487/RFC1950
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["adler32"]

_ADLER_MOD = 65521
#: Largest byte count whose Adler-32 sums cannot overflow 32 bits (zlib's NMAX).
_ADLER_BLOCK = 5552


@njit(cache=True, nogil=True)
def adler32(data, value):
    """Adler-32 checksum of ``data`` continuing from ``value``, as ``zlib.adler32`` computes it.

    Per block of at most 5552 bytes (the most whose sums cannot overflow 32 bits), the byte sum and
    the position-weighted sum are plain reductions that the compiler vectorises.

    Parameters
    ----------
    data : (n,) uint8 ndarray
    value : int
        Checksum so far (1 for a new stream).

    Returns
    -------
    int
        ``(B << 16) | A`` with A = 1 + sum of bytes and B = sum of the running A (both mod 65521).

    References
    ----------
    Deutsch, P., Gailly, J.-L. (1996). ZLIB compressed data format specification version 3.3,
    section 9. RFC 1950. https://doi.org/10.17487/RFC1950

    Examples
    --------
    >>> hex(adler32(np.frombuffer(b"Wikipedia", np.uint8), 1))
    '0x11e60398'
    """
    a = np.int64(value & 0xFFFF)
    b = np.int64((value >> 16) & 0xFFFF)
    n = data.size
    i = 0
    while i < n:
        m = min(_ADLER_BLOCK, n - i)
        block = data[i:i + m]
        s = np.int32(0)
        t = np.int32(0)
        for k in range(m):
            v = np.int32(block[k])
            s += v
            t += np.int32(m - k) * v
        b = (b + a * m + np.int64(t)) % _ADLER_MOD
        a = (a + np.int64(s)) % _ADLER_MOD
        i += m
    return (b << 16) | a
