"""One BLAS thread for the small dense products of the comparability kernels. Private.

``threadpoolctl.threadpool_limits`` looks up the loaded BLAS libraries on every call (it reads the
process's memory map: about 2.6 ms, as much as a fifth of a date's radiometric fit); the controller that
holds them is made once here and its ``limit`` reused.
"""

from __future__ import annotations

import functools


@functools.lru_cache(maxsize=1)
def _controller():
    from threadpoolctl import ThreadpoolController

    return ThreadpoolController()


def one_blas_thread():
    """Context manager: BLAS on one thread inside it (tall-and-thin products and small matrices gain
    nothing from more, and on a busy machine waited for a free core)."""
    return _controller().limit(limits=1, user_api="blas")
