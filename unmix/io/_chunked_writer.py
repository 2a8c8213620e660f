"""Parallel compression for the NetCDF writer: dask tasks compress chunks, HDF5 only stores them.

HDF5 runs its filters (byte shuffle, deflate) inside the library, one chunk at a time under a global
lock, so a fast kernel ends up waiting for one core to compress its output. Here the file is defined
by netCDF4 through xarray's own encoder (dimensions, coordinates, CF attributes, grid mapping, chunk
shapes, ``zlib``/``shuffle`` filters) without writing the lazy variables; each dask task then

1. cuts its block into the variable's HDF5 chunks (edge chunks padded with the fill value, since
   HDF5 stores every chunk at full size),
2. applies the shuffle filter (a numpy byte transpose, :func:`shuffle_bytes`) and compresses the
   result into one zlib stream (:func:`zlib_chunk`) with ISA-L (python-isal) at the NetCDF levels
   1-3 and CPython's zlib at 4-9; both release the GIL, so worker threads compress side by side, and
3. hands the finished bytes to HDF5 with h5py's ``write_direct_chunk`` under a lock.

The file stays an ordinary NetCDF4/HDF5 file: the variables carry HDF5's standard shuffle and
deflate filters (as netCDF4 defined them, with the requested level in the filter parameters, which
decoders do not need), and every stored chunk is a standard zlib stream of the shuffled bytes, so any
netCDF/HDF5/GDAL reader decodes it with its own inflate. Shuffle + ISA-L's deflate at its level 1
is six to nine times as fast as shuffle + zlib's level 1 on float32 fractions, for chunks 0.4 %
larger (``benchmarks/bench_encoder.py``).

Where the writes happen
-----------------------
* Threaded (or synchronous) scheduler: one h5py handle in ``"r+"`` mode per file, opened by the
  first task and shared under a ``threading.Lock``; the last task of the graph closes it.
* ``dask.distributed`` workers (processes, maybe on other machines with a shared file system):
  each task takes a cluster-wide ``distributed.Lock`` named after the file, opens the file in
  ``"r+"`` mode, writes its compressed chunks and closes it. Only compressed bytes of one block are
  held per task, so memory stays bounded by the chunk size; nothing is gathered to the client.

A variable whose filter pipeline is not the expected one (for example a future library adding a
checksum) falls back to ordinary h5py writes, where HDF5 compresses; the result is the same file.
"""

from __future__ import annotations

import contextlib
import itertools
import sys
import threading
import zlib
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np
from isal import isal_zlib

__all__ = ["define_and_plan", "release", "ChunkTarget", "shuffle_bytes", "zlib_chunk"]

_H5Z_FILTER_DEFLATE = 1
_H5Z_FILTER_SHUFFLE = 2
#: NetCDF levels 1 up to this one are compressed by ISA-L at the same level (ISA-L's levels are 0-3).
_ISAL_MAX_LEVEL = 3


def shuffle_bytes(values: np.ndarray) -> np.ndarray:
    """HDF5's shuffle filter: the first bytes of all values, then all second bytes, and so on.

    Parameters
    ----------
    values : ndarray
        Any fixed-size dtype, any shape and strides (read in C order).

    Returns
    -------
    (itemsize, values.size) uint8 ndarray
        C-contiguous; row ``p`` holds byte ``p`` (in memory order) of every value.

    Examples
    --------
    >>> shuffle_bytes(np.array([1, 2], dtype="<u2"))
    array([[1, 2],
           [0, 0]], dtype=uint8)
    """
    values = np.ascontiguousarray(values)
    size = values.dtype.itemsize
    return np.ascontiguousarray(values.reshape(-1).view(np.uint8).reshape(-1, size).T)


def zlib_chunk(values: np.ndarray, level: int, shuffle: bool = True) -> bytes:
    """The zlib stream (RFC 1950) that HDF5's shuffle + deflate filters decode into ``values``.

    Levels 1-3 use ISA-L's deflate at the same level. Its levels differ little in size: 0.757,
    0.756 and 0.763 of raw for shuffled float32 fractions at levels 1, 2 and 3 (zlib's level 1:
    0.754), and level 3 is the slowest (about 350-500 MB/s at level 1, two thirds of that at level 3,
    shuffle included, one thread of the development machine). Levels 4-9 use CPython's zlib at that
    level, for chunks a few percent smaller (0.737 at level 6) at a tenth of the speed or less;
    level 0 gives zlib's stored blocks. Any inflate decodes both.

    Parameters
    ----------
    values : ndarray
        One HDF5 chunk (full size), any shape and fixed-size dtype, stored in C order.
    level : int
        NetCDF/HDF5 deflate level 0-9.
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
    >>> import zlib
    >>> chunk = np.full((4, 64), np.nan, np.float32)
    >>> stream = zlib_chunk(chunk, 1)
    >>> zlib.decompress(stream) == shuffle_bytes(chunk).tobytes(), len(stream) < 60
    (True, True)
    """
    level = int(level)
    data = shuffle_bytes(values) if shuffle else np.ascontiguousarray(values).reshape(-1).view(np.uint8)
    if 1 <= level <= _ISAL_MAX_LEVEL:
        return isal_zlib.compress(data, level)
    return zlib.compress(data, level)  # 0 (stored blocks) and 4-9; zlib.error for anything else


# threaded scheduler: one open h5py file per temporary product, and a lock per file
_REGISTRY_LOCK = threading.Lock()
_HANDLES: dict[str, Any] = {}
_LOCKS: dict[str, threading.Lock] = {}
_CLOSED: set[str] = set()


def _h5_open(path: str, mode: str) -> Any:
    import h5py

    try:  # our own locks serialise the writers; HDF5's flock fails on some shared file systems
        return h5py.File(path, mode, locking=False)
    except TypeError:  # pragma: no cover - h5py < 3.5
        return h5py.File(path, mode)


def _in_distributed_worker() -> bool:
    if "distributed" not in sys.modules:  # never imported: this cannot be a distributed worker
        return False
    try:
        from distributed import get_worker

        get_worker()
    except (ImportError, ValueError):
        return False
    return True


@contextlib.contextmanager
def _writable(path: str) -> Iterator[Any]:
    """The open h5py file of ``path``, held exclusively for the duration of the block."""
    if _in_distributed_worker():
        from distributed import Lock

        with Lock(f"unmix-netcdf-write:{path}"):
            f = _h5_open(path, "r+")
            try:
                yield f
            finally:
                f.close()
        return
    with _REGISTRY_LOCK:
        if path in _CLOSED:
            raise RuntimeError(f"the write of {path} was already finished or abandoned")
        lock = _LOCKS.setdefault(path, threading.Lock())
    with lock:
        if path in _CLOSED:  # released while this task waited for the lock: never reopen
            raise RuntimeError(f"the write of {path} was already finished or abandoned")
        f = _HANDLES.get(path)
        if f is None:
            f = _HANDLES[path] = _h5_open(path, "r+")
        yield f


def release(path: str | Path) -> None:
    """Close this process's handle on ``path`` (if any) and refuse further writes to it."""
    path = str(path)
    with _REGISTRY_LOCK:
        _CLOSED.add(path)
        lock = _LOCKS.pop(path, None)
    if lock is None:
        return
    with lock:
        f = _HANDLES.pop(path, None)
        if f is not None:
            f.close()


def _finish(_stored: Any, path: str) -> None:
    """Last task of the write graph: close the shared handle of the threaded scheduler."""
    if not _in_distributed_worker():
        release(path)


class ChunkTarget:
    """A ``dask.array.store`` target that compresses blocks itself and stores HDF5 chunks directly.

    Parameters
    ----------
    path : str
        The file (already defined by netCDF4 and closed).
    name : str
        HDF5 dataset (= NetCDF variable) name.
    shape, chunks : tuple of int
        Dataset shape and HDF5 chunk shape (``chunks`` None for a contiguous or scalar variable).
    dtype : numpy dtype
        Stored type.
    fill : scalar
        Fill value used to pad edge chunks.
    pipeline : tuple of int or None
        Filters to apply, in HDF5 order (``(2, 1)`` = shuffle then deflate, ``(1,)``, ``()``);
        None means "let HDF5 do it" (ordinary writes).
    level : int
        Deflate level.
    """

    def __init__(self, path: str, name: str, shape: tuple[int, ...], chunks: tuple[int, ...] | None,
                 dtype: np.dtype, fill: Any, pipeline: tuple[int, ...] | None, level: int) -> None:
        self.path = path
        self.name = name
        self.shape = tuple(shape)
        self.chunks = None if chunks is None else tuple(int(c) for c in chunks)
        self.dtype = np.dtype(dtype)
        self.ndim = len(self.shape)
        self.fill = fill
        self.pipeline = pipeline
        self.level = int(level)

    def __dask_tokenize__(self) -> tuple:
        return (type(self).__name__, self.path, self.name, self.shape, self.chunks, str(self.dtype), self.pipeline,
                self.level)

    def encode_chunk(self, chunk: np.ndarray) -> bytes:
        """The bytes stored for one full-size chunk: what HDF5's shuffle + deflate filters decode.

        See :func:`shuffle_bytes` and :func:`zlib_chunk`.
        """
        raw = np.asarray(chunk, dtype=self.dtype)
        pipeline = self.pipeline or ()
        shuffle = _H5Z_FILTER_SHUFFLE in pipeline and self.dtype.itemsize > 1
        if _H5Z_FILTER_DEFLATE in pipeline:
            return zlib_chunk(raw, self.level, shuffle=shuffle)
        return shuffle_bytes(raw).tobytes() if shuffle else np.ascontiguousarray(raw).tobytes()

    def __setitem__(self, region: tuple[slice, ...], block: Any) -> None:
        block = np.asarray(block)
        if block.dtype != self.dtype:
            block = block.astype(self.dtype)
        if self.pipeline is None or self.chunks is None:
            with _writable(self.path) as f:
                f[self.name][region] = block
            return
        starts = tuple(int(s.start or 0) for s in region)
        ranges = [range(0, n, c) for n, c in zip(block.shape, self.chunks)]
        pieces = []
        for index in itertools.product(*ranges):
            offset = tuple(s + i for s, i in zip(starts, index))
            if any(o % c for o, c in zip(offset, self.chunks)):
                raise RuntimeError(f"block of {self.name} at {offset} is not aligned with chunks {self.chunks}")
            sub = block[tuple(slice(i, i + c) for i, c in zip(index, self.chunks))]
            if sub.shape != self.chunks:  # edge chunk: HDF5 keeps it full size, padded
                full = np.full(self.chunks, self.fill, dtype=self.dtype)
                full[tuple(slice(0, n) for n in sub.shape)] = sub
                sub = full
            pieces.append((offset, self.encode_chunk(sub)))  # ISA-L and zlib release the GIL
        with _writable(self.path) as f:
            dset = f[self.name].id
            for offset, data in pieces:
                dset.write_direct_chunk(offset, data, 0)


def _aligned(source: Any, chunks: tuple[int, ...]) -> Any:
    """``source`` rechunked where its block edges do not fall on HDF5 chunk edges."""
    wanted = {}
    for axis, (dask_chunks, c) in enumerate(zip(source.chunks, chunks)):
        edges = np.cumsum(dask_chunks[:-1])
        if np.any(edges % c):
            wanted[axis] = c
    return source.rechunk(wanted) if wanted else source


class _Collector:
    """Stands in for xarray's ArrayWriter: numpy data is written now, lazy data is only collected."""

    def __init__(self) -> None:
        self.sources: list[Any] = []
        self.names: list[str] = []

    def add(self, source: Any, target: Any, region: Any = None) -> None:
        import dask

        if dask.is_dask_collection(source):
            self.sources.append(source)
            self.names.append(target.variable_name)
        elif region:
            target[region] = source
        else:
            target[...] = source


def _target_for(f: Any, path: str, name: str) -> ChunkTarget:
    """Read the layout netCDF4 gave variable ``name`` and build the matching target."""
    if name not in f:
        raise RuntimeError(f"variable {name} was not found as an HDF5 dataset in {path}")
    dset = f[name]
    plist = dset.id.get_create_plist()
    filters = [plist.get_filter(i) for i in range(plist.get_nfilters())]
    codes = tuple(int(flt[0]) for flt in filters)
    level = 0
    pipeline: tuple[int, ...] | None
    if dset.chunks is not None and codes in ((_H5Z_FILTER_SHUFFLE, _H5Z_FILTER_DEFLATE), (_H5Z_FILTER_DEFLATE,), ()):
        pipeline = codes
        for flt in filters:
            if int(flt[0]) == _H5Z_FILTER_DEFLATE:
                level = int(flt[2][0]) if len(flt[2]) else 6  # HDF5's default level when none is stored
    else:
        pipeline = None
    fill = dset.fillvalue
    return ChunkTarget(path, name, dset.shape, dset.chunks, dset.dtype, fill, pipeline, level)


def define_and_plan(ds: Any, path: str | Path, encoding: Mapping[str, Mapping[str, Any]]) -> Any:
    """Define ``path`` from ``ds`` with netCDF4 and return the delayed write of its lazy variables.

    Parameters
    ----------
    ds : xarray.Dataset
        Prepared dataset (CF attributes set). Numpy-backed variables are written at once;
        dask-backed ones are only defined.
    path : path
        A new file (the writer's temporary name).
    encoding : mapping
        Per-variable encoding for xarray (``dtype``, ``_FillValue``, ``chunksizes``, ``zlib``...).

    Returns
    -------
    dask.delayed.Delayed
        Computing it computes every lazy variable chunk by chunk, compresses each chunk in the
        worker and stores it; its last task closes the file handle of the threaded scheduler.
        Call :func:`release` afterwards in any case (it is a no-op when already closed).
    """
    import threading as _threading

    import dask
    import dask.array as da
    from xarray.backends import NetCDF4DataStore

    path = str(path)
    # numpy-backed chunked variables become lazy so that their compression is spread over threads too
    ds = ds.copy(deep=False)
    for name, var in ds.data_vars.items():
        sizes = encoding.get(name, {}).get("chunksizes")
        if sizes and not dask.is_dask_collection(var.data) and var.dtype.kind in "fiu":
            ds[name] = var.chunk(dict(zip(var.dims, sizes)))

    collector = _Collector()
    store = NetCDF4DataStore.open(path, mode="w", format="NETCDF4", lock=_threading.Lock())
    try:
        ds.dump_to_store(store, writer=collector, encoding=dict(encoding))
    finally:
        store.close()

    sources, targets = [], []
    with _h5_open(path, "r") as f:
        for source, name in zip(collector.sources, collector.names):
            target = _target_for(f, path, name)
            if tuple(source.shape) != target.shape:
                raise RuntimeError(f"variable {name}: data {source.shape} but file {target.shape}")
            if target.chunks is not None and target.pipeline is not None:
                source = _aligned(source, target.chunks)
            sources.append(source)
            targets.append(target)
    if sources:
        stored = da.store(sources, targets, lock=False, compute=False)
    else:
        stored = None
    return dask.delayed(_finish, pure=False)(stored, path)
