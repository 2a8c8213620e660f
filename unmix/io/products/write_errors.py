"""File-system failures while writing products, as one :class:`~unmix.errors.ProductWriteError` line.

Libraries report a full disk or a file size limit in assorted ways: ``OSError`` with an errno,
netCDF4's ``RuntimeError("NetCDF: HDF error")`` without one, h5py's RuntimeErrors quoting HDF5's
"errno = 27" in their text, GDAL's ``CPLE_*`` errors through rasterio. These helpers recognise them
and name the likely cause and its fix.
"""

from __future__ import annotations

import errno
import os
import re
from pathlib import Path

from ...errors import ProductWriteError, UnmixError

__all__ = ["is_write_failure", "write_error"]


def _errno_of(exc: BaseException) -> int | None:
    """The errno of a failed write; HDF5 puts it only into its message ("errno = 28, ...")."""
    code = getattr(exc, "errno", None)
    if code and not type(exc).__module__.startswith("rasterio"):  # GDAL's CPLE numbers are no errno
        return int(code)
    m = re.search(r"errno = (\d+)", str(exc))
    return int(m.group(1)) if m else None


def _likely_cause(folder: Path) -> int | None:
    """When a library reports a failed write without errno: a full disk or a file size limit?"""
    try:
        st = os.statvfs(folder)
        if st.f_bavail * st.f_frsize < 1 << 20:
            return errno.ENOSPC
    except (AttributeError, OSError):  # pragma: no cover - no statvfs (Windows)
        pass
    try:
        import resource

        if resource.getrlimit(resource.RLIMIT_FSIZE)[0] != resource.RLIM_INFINITY:
            return errno.EFBIG
    except (ImportError, OSError, ValueError):  # pragma: no cover - no resource module (Windows)
        pass
    return None


_HINTS = {
    errno.ENOSPC: "the disk is full: free some space or choose another --out",
    errno.EDQUOT: "the disk quota is exhausted: free some space or choose another --out",
    errno.EFBIG: "the file size limit of this process (ulimit -f) or file system was reached; raise it or "
                 "choose another --out",
    errno.EROFS: "the file system is read-only; choose another --out",
    errno.EACCES: "choose a folder you may write to (--out)",
    errno.EPERM: "choose a folder you may write to (--out)",
    errno.ENOTDIR: "a part of the path is a file, not a folder; choose another --out",
}


def write_error(path: Path, exc: BaseException, doing: str, before: bool = False) -> ProductWriteError:
    """One-line error for a failed write; ``before``: the failure came before anything was written."""
    code = _errno_of(exc)
    folder = path if path.is_dir() else path.parent
    cause = code if code in _HINTS else _likely_cause(folder)
    if code is not None:
        reason = os.strerror(code)
    else:
        text = str(exc).strip()
        reason = text.splitlines()[0][:200] if text else type(exc).__name__
    hint = _HINTS.get(cause, "check the folder and its free space, or choose another --out")
    tail = "nothing was written" if before else "nothing of this run was kept"
    err = ProductWriteError(f"cannot {doing} {path}: {reason}; {hint}; {tail}")
    err.errno = cause
    return err


def is_write_failure(exc: BaseException) -> bool:
    """Does ``exc`` come from the file system (full disk, size limit, permissions, I/O)?

    Errors of this package (bad input, unreadable input chunks) and programming errors are not.
    netCDF4 reports HDF5 write failures as ``RuntimeError("NetCDF: ...")``, h5py some as
    RuntimeErrors quoting HDF5's errno, GDAL (through rasterio) as its own ``CPLE_*`` / ``Rasterio*``
    errors.
    """
    if isinstance(exc, UnmixError):
        return False
    if isinstance(exc, OSError):
        return True
    if type(exc).__module__.startswith("rasterio"):
        return True
    # netCDF4: "NetCDF: HDF error"; h5py closing a file it could not flush: "... errno = 27, ..."
    return isinstance(exc, RuntimeError) and (str(exc).startswith("NetCDF:") or _errno_of(exc) is not None)
