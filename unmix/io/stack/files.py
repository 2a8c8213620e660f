"""Which files make a stack: a folder's GeoTIFFs or a list of files; NetCDF recognised by name or magic.

Also the identity of a file (:class:`FileIdentity`: size, modification time, inode and device), recorded
when a stack is opened and checked again by every read, so a file changed in between is reported
instead of being read with a layout that no longer holds.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from ...errors import StackReadError

__all__ = ["find_stack_files", "FileIdentity"]

GEOTIFF_SUFFIXES = (".tif", ".tiff")
NETCDF_SUFFIXES = (".nc", ".nc4", ".cdf", ".netcdf")


def find_stack_files(source: str | os.PathLike | Sequence[str | os.PathLike]) -> list[Path]:
    """The GeoTIFF files of a stack: a folder's ``*.tif``/``*.tiff`` (sorted by name) or the list given.

    Raises
    ------
    StackReadError
        The folder or a listed file does not exist, or the folder holds no GeoTIFF.
    """
    if isinstance(source, (str, os.PathLike)):
        path = Path(source)
        if path.is_dir():
            files = sorted(
                p for p in path.iterdir() if p.suffix.lower() in GEOTIFF_SUFFIXES and not p.name.startswith(".")
            )
            if not files:
                raise StackReadError(
                    f"no GeoTIFFs (*.tif, *.tiff) were found in the folder {path}; put one file per date there "
                    "or pass the files themselves"
                )
            return files
        if not path.exists():
            raise StackReadError(f"stack {path} not found; give a folder of GeoTIFFs, GeoTIFF files or a NetCDF cube")
        return [path]
    files = [Path(p) for p in source]
    if not files:
        raise StackReadError("the list of stack files is empty; give at least one GeoTIFF")
    for f in files:
        if not f.is_file():
            raise StackReadError(f"stack file {f} not found; check the path")
    return files


def _is_netcdf(path: Path) -> bool:
    if path.suffix.lower() in NETCDF_SUFFIXES:
        return True
    try:
        with path.open("rb") as fh:
            magic = fh.read(8)
    except OSError:
        return False
    return magic[:3] == b"CDF" or magic[:8] == b"\x89HDF\r\n\x1a\n"



@dataclass(frozen=True)
class FileIdentity:
    """What tells one version of a file from another: size [bytes], mtime [ns], inode and device."""

    size: int
    mtime_ns: int
    inode: int
    device: int

    @classmethod
    def of(cls, st: os.stat_result) -> FileIdentity:
        return cls(st.st_size, st.st_mtime_ns, st.st_ino, st.st_dev)

    def check(self, st: os.stat_result, path: str | os.PathLike) -> None:
        """Raise :class:`StackReadError` naming ``path`` and what changed when ``st`` is another version."""
        now = FileIdentity.of(st)
        changed = [
            f"{what} {a} -> {b}"
            for what, a, b in (
                ("size", self.size, now.size), ("modification time [ns]", self.mtime_ns, now.mtime_ns),
                ("inode", self.inode, now.inode), ("device", self.device, now.device),
            )
            if a != b
        ]
        if changed:
            raise StackReadError(
                f"{path} was modified after the stack was opened ({', '.join(changed)}); re-run to read the new version"
            )
