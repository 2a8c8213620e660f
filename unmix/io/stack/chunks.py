"""Spatial chunking of a stack and the dask graph of per-(date, window) read tasks."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from ...errors import InputError
from .geotiff import _DateReader, _read_block

#: Target chunk edge [pixels] when the chunking follows the files' tiles.
_TARGET_EDGE = 1024


def _spatial_chunks(height: int, width: int, block_shape: tuple[int, int], chunks: Any) -> tuple[tuple, tuple]:
    bh, bw = block_shape
    if chunks is None or chunks == "auto":
        if bw >= width:  # striped file: whole rows, about _TARGET_EDGE**2 pixels per chunk
            ch = max(bh, (_TARGET_EDGE * _TARGET_EDGE // max(width, 1)) // bh * bh)
            cw = width
        else:
            ch = max(bh, _TARGET_EDGE // bh * bh)
            cw = max(bw, _TARGET_EDGE // bw * bw)
    elif isinstance(chunks, Mapping):
        ch = int(chunks.get("y", height) or height)
        cw = int(chunks.get("x", width) or width)
    else:
        edge = int(chunks)
        if edge < 1:
            raise InputError(f"chunk size must be a positive number of pixels, got {chunks}")
        ch = edge if bh >= height else max(bh, math.ceil(edge / bh) * bh) if edge >= bh else edge
        cw = edge if bw >= width else max(bw, math.ceil(edge / bw) * bw) if edge >= bw else edge
    ch, cw = min(ch, height), min(cw, width)

    def split(total: int, step: int) -> tuple[int, ...]:
        sizes = [step] * (total // step)
        if total % step:
            sizes.append(total % step)
        return tuple(sizes)

    return split(height, ch), split(width, cw)



def _dask_from_readers(readers: list[_DateReader], n_bands: int, ychunks: tuple, xchunks: tuple) -> Any:
    import dask.array as da
    from dask.base import tokenize

    name = "read-stack-" + tokenize(readers, ychunks, xchunks)
    dsk: dict = {}
    ystarts = np.concatenate([[0], np.cumsum(ychunks)])
    xstarts = np.concatenate([[0], np.cumsum(xchunks)])
    for t, reader in enumerate(readers):
        for i in range(len(ychunks)):
            for j in range(len(xchunks)):
                window = (int(ystarts[i]), int(ystarts[i + 1]), int(xstarts[j]), int(xstarts[j + 1]))
                dsk[(name, t, 0, i, j)] = (_read_block, reader, window)
    chunks = ((1,) * len(readers), (n_bands,), ychunks, xchunks)
    return da.Array(dsk, name, chunks, dtype=np.float32, meta=np.empty((0, 0, 0, 0), np.float32))

