"""The spectral libraries shipped with unmix: where they are and how to read them by name.

The libraries live in the repository's top-level ``endmembers/`` folder. A regular (wheel) install
carries a copy of that folder inside the package as ``unmix/_shipped/`` (the packaging tables of
``pyproject.toml`` map ``endmembers/`` onto the data package ``unmix._shipped``); an editable install
or a source checkout finds the folder itself beside the package. :func:`shipped_library_dir` tries the
installed copy first, then the source tree.
"""

from __future__ import annotations

import importlib.resources
from pathlib import Path

from ...errors import LibraryReadError
from ...spectra import SpectralLibrary
from .reader import read_library

__all__ = ["shipped_library_dir", "shipped_library_path", "read_shipped_library"]

#: Folder of the installed copy of ``endmembers/`` inside the ``unmix`` package (see pyproject.toml).
_INSTALLED_FOLDER = "_shipped"


def _installed_dir() -> Path | None:
    """``unmix/_shipped`` of a regular install, or None (editable install, source tree, zip import)."""
    try:
        candidate = importlib.resources.files("unmix") / _INSTALLED_FOLDER
    except (ModuleNotFoundError, TypeError):  # pragma: no cover - unmix always importable here
        return None
    return candidate if isinstance(candidate, Path) else None


def _source_dir() -> Path:
    """``endmembers/`` at the top of the source tree this package was imported from."""
    return Path(__file__).resolve().parents[3] / "endmembers"


def _candidate_dirs() -> tuple[Path, ...]:
    installed = _installed_dir()
    return (installed, _source_dir()) if installed is not None else (_source_dir(),)


def shipped_library_dir() -> Path:
    """Folder holding the shipped libraries (CSV files and their JSON sidecars).

    Returns
    -------
    Path
        ``unmix/_shipped`` of a regular install if present, else ``endmembers/`` of the source tree
        (editable install or checkout).

    Raises
    ------
    LibraryReadError
        Neither folder exists (the message names both).

    Examples
    --------
    >>> (shipped_library_dir() / "demo_library.csv").is_file()
    True
    """
    candidates = _candidate_dirs()
    for d in candidates:
        if d.is_dir():
            return d
    raise LibraryReadError(
        f"the shipped library folder is missing (looked in {' and '.join(str(d) for d in candidates)}); "
        "reinstall unmix, or run from a source checkout of unmix "
        "(python endmembers/make_demo_library.py regenerates the files)"
    )


def shipped_library_path(name: str = "demo_library") -> Path:
    """Path of a library shipped with unmix (the repository's top-level ``endmembers/`` folder).

    Parameters
    ----------
    name : str
        File stem, e.g. ``"demo_library"``, ``"demo_bundles"``, ``"demo_library_landsat-8-oli"``,
        ``"demo_library_sentinel-2a-msi"`` (a ``.csv`` suffix is accepted).

    Raises
    ------
    LibraryReadError
        The folder or the file is absent (the message lists the shipped names).

    Examples
    --------
    >>> shipped_library_path("demo_library.csv").name
    'demo_library.csv'
    """
    d = shipped_library_dir()
    stem = name[:-4] if name.lower().endswith(".csv") else name
    p = d / f"{stem}.csv"
    if not p.is_file():
        avail = sorted(q.stem for q in d.glob("*.csv"))
        raise LibraryReadError(
            f"no shipped library {stem!r} in {d}; available: {', '.join(avail) or 'none'}"
        )
    return p


def read_shipped_library(name: str = "demo_library") -> SpectralLibrary:
    """Read a shipped library by name (see :func:`shipped_library_path`)."""
    return read_library(shipped_library_path(name))
