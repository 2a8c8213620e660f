"""Write a spectral library as CSV plus JSON sidecar, atomically."""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

from ...errors import LibraryFormatError, LibraryReadError, OutputExistsError
from ...spectra import SpectralLibrary
from .reader import sidecar_path

__all__ = ["write_library"]


def _fmt(v: float) -> str:
    """Shortest text that reads back to the same float64."""
    v = float(v)
    return "0" if v == 0 else repr(v)


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _atomic_write_text(path: Path, text: str) -> Path:
    """Write ``text`` to a temporary file beside ``path`` and return it (renamed by the caller)."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as f:
            f.write(text)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600 files; give the usual permissions
    except BaseException:
        os.unlink(tmp)
        raise
    return Path(tmp)


def write_library(library: SpectralLibrary, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write a library as CSV plus JSON sidecar, atomically (temporary files, then rename).

    Parameters
    ----------
    library : SpectralLibrary
        The library; a resampled one gets the ``band`` column and ``sensor`` in the sidecar.
    path : str or path-like
        The CSV to write; the sidecar goes beside it with suffix ``.json``.
    overwrite : bool
        Replace existing files. Without it an existing CSV or sidecar raises
        :class:`unmix.errors.OutputExistsError` and nothing is written.

    Returns
    -------
    Path
        The CSV written. Values are written with the shortest text that reads back to the same
        float64, so :func:`read_library` returns the same numbers.
    """
    path = Path(path)
    sc = sidecar_path(path)
    if path.suffix.lower() != ".csv":
        raise LibraryFormatError(f"{path}: a library file must end in .csv")
    if not overwrite:
        for p in (path, sc):
            if p.exists():
                raise OutputExistsError(f"{p} exists already; pass overwrite=True (--overwrite) to replace it")
    if not path.parent.exists():
        raise LibraryReadError(f"folder {path.parent} does not exist; create it first")
    lines = []
    head = ["wavelength_nm"] + (["band"] if library.resampled else []) + list(library.names)
    if any(("," in n or '"' in n or "\n" in n) for n in head):
        raise LibraryFormatError(f"{path}: spectrum names must not contain commas, quotes or line breaks")
    lines.append(",".join(head))
    for k in range(library.wavelengths.size):
        cells = [_fmt(library.wavelengths[k])]
        if library.resampled:
            cells.append(library.band_names[k])
        cells.extend(_fmt(v) for v in library.spectra[:, k])
        lines.append(",".join(cells))
    csv_text = "\n".join(lines) + "\n"

    # a plan read with the library belongs to the run that wrote it: only the running plan is recorded
    md = {k: v for k, v in library.metadata.items()
          if k not in ("path", "spectra", "units", "reflectance_scale", "scale_factor", "add_offset", "plan",
                       "plan_sha256")}
    from ..products.provenance import plan_attrs  # here: the products package pulls in xarray

    md.update(plan_attrs())
    old_spectra = library.metadata.get("spectra", {}) or {}
    spectra = {}
    for n, c in zip(library.names, library.classes):
        entry = dict(old_spectra.get(n, {})) if isinstance(old_spectra.get(n, {}), dict) else {}
        entry.pop("class", None)
        spectra[n] = ({"class": c} if c is not None else {}) | entry
    meta = {"units": "nm", "scale_factor": 1, "add_offset": 0}
    if library.resampled and "sensor" not in md:
        md["sensor"] = None
    meta.update(md)
    meta["spectra"] = spectra
    json_text = json.dumps(meta, indent=2, ensure_ascii=False, default=str) + "\n"

    tmp_json = _atomic_write_text(sc, json_text)
    try:
        tmp_csv = _atomic_write_text(path, csv_text)
    except BaseException:
        os.unlink(tmp_json)
        raise
    os.replace(tmp_json, sc)
    os.replace(tmp_csv, path)
    return path
