"""Run summaries of lazy cubes, each in one compiled pass per chunk (for command summaries)."""

from __future__ import annotations

from typing import Any

import numba
import numpy as np
import xarray as xr

__all__ = ["finite_mean"]


@numba.njit(cache=True, nogil=True)
def _finite_sum_count(values: np.ndarray) -> np.ndarray:  # pragma: no cover - compiled
    total = 0.0
    count = 0
    for v in values:
        if np.isfinite(v):
            total += v
            count += 1
    return np.array([total, count], dtype=np.float64)


def _block_sum_count(block: np.ndarray) -> np.ndarray:
    flat = np.ascontiguousarray(block).reshape(-1)
    return _finite_sum_count(flat).reshape((1,) * block.ndim + (2,))


def finite_mean(da: xr.DataArray) -> Any:
    """Mean of the finite values of ``da`` (lazy dask scalar when ``da`` is dask-backed), in one pass.

    Used for run summaries (mean RMSE): one compiled pass per chunk in float64, without the
    NaN-replaced copy that ``nanmean`` makes; NaN when no value is finite.
    """
    if da.chunks is None:
        total, count = _finite_sum_count(np.ascontiguousarray(da.values).reshape(-1))
        return total / count if count else np.nan
    import dask.array as dsa

    data = da.data
    parts = dsa.map_blocks(_block_sum_count, data, chunks=tuple((1,) * len(c) for c in data.chunks) + ((2,),),
                           new_axis=[data.ndim], dtype=np.float64, meta=np.empty((0,) * (data.ndim + 1), np.float64))
    sums = parts.reshape(-1, 2).sum(axis=0)
    return dsa.where(sums[1] > 0, sums[0] / dsa.maximum(sums[1], 1), np.nan)
