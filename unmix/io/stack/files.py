"""Which files make a stack: a folder's GeoTIFFs or a list of files; NetCDF recognised by name or magic."""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path

from ...errors import StackReadError

__all__ = ["find_stack_files"]

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

