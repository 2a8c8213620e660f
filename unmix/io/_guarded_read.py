"""Lazy NetCDF reads whose failures name the file, the variable and the chunk.

netCDF4/HDF5 raise bare RuntimeErrors ("NetCDF: HDF error") when a file is damaged, truncated,
replaced or removed after it was opened, and they surface only when dask computes a chunk, deep in a
command. Shared by the stack reader (:mod:`unmix.io.stack.netcdf`) and the product reader
(:func:`unmix.io.products.open_product`).
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ..errors import StackReadError

__all__ = ["GuardedVariable", "guarded_dataset"]

_HINT = "the file was changed, truncated or removed after it was opened, or is damaged: copy it again and rerun"


class GuardedVariable:
    """One NetCDF variable, read lazily; a failed read raises :class:`StackReadError` naming the file.

    Holds xarray's lazily decoded variable (its file handle is managed, locked and pickled by
    xarray); dask calls :meth:`__getitem__` once per chunk.
    """

    def __init__(self, variable: xr.Variable, path: Path, name: str, hint: str = _HINT) -> None:
        self._variable = variable
        self.path, self.name, self.hint = str(path), name, hint
        self.shape, self.dtype, self.ndim = variable.shape, variable.dtype, variable.ndim

    def __getitem__(self, key: tuple) -> np.ndarray:
        try:
            return np.asarray(self._variable[key].values)
        except Exception as exc:
            where = ", ".join(
                f"{dim} {k.start or 0}-{size if k.stop is None else k.stop}" if isinstance(k, slice) else f"{dim} {k}"
                for dim, k, size in zip(self._variable.dims, key, self.shape)
            )
            raise StackReadError(
                f"reading {self.name!r} of {self.path} ({where}) failed: {exc}; {self.hint}"
            ) from None


def guarded_dataset(ds: xr.Dataset, path: Path, chunks: Mapping[str, int] | str | None = None,
                    hint: str = _HINT) -> xr.Dataset:
    """``ds`` (opened with ``chunks=None``) with every data variable backed by dask over a
    :class:`GuardedVariable`.

    ``chunks``: dask chunks per dimension (``-1`` = whole dimension); dimensions not named, and all
    of them by default, keep the file's own chunks; a string (``"auto"``) is passed to dask.
    """
    import dask.array as da
    from dask.base import tokenize

    spec: Any = {} if chunks is None else chunks
    stamp = path.stat()
    for name, var in ds.data_vars.items():
        if isinstance(spec, str):
            blocks: Any = spec
        else:
            stored = var.encoding.get("chunksizes")
            sizes = []
            for i, (dim, size) in enumerate(zip(var.dims, var.shape)):
                wanted = spec.get(dim)
                if wanted is None:
                    wanted = stored[i] if stored and len(stored) == var.ndim else size
                sizes.append(size if wanted == -1 else max(1, min(int(wanted), size)))
            blocks = tuple(sizes)
        token = tokenize(str(path), stamp.st_mtime_ns, stamp.st_size, str(name), str(var.dtype), blocks)
        data = da.from_array(
            GuardedVariable(var.variable, path, str(name), hint), chunks=blocks, asarray=False, lock=False,
            name=f"read-netcdf-{token}", meta=np.empty((0,) * var.ndim, dtype=var.dtype),
        )
        ds[name] = var.copy(data=data)
    return ds
