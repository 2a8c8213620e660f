"""Read a spectral-library CSV and its JSON sidecar, validating the format.

The format is described in :mod:`unmix.io.library`.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from ...errors import LibraryFormatError, LibraryReadError
from ...spectra import SpectralLibrary
from ._table import _WL_HEADERS, _parse_float, _read_rows

__all__ = ["REFLECTANCE_RANGE", "read_library", "sidecar_path"]

#: Allowed reflectance after scaling, inclusive.
REFLECTANCE_RANGE = (-0.05, 1.5)

_UNITS = {"nm": 1.0, "nanometre": 1.0, "nanometer": 1.0, "um": 1000.0, "µm": 1000.0, "micrometre": 1000.0,
          "micrometer": 1000.0}


def sidecar_path(path: str | os.PathLike) -> Path:
    """The JSON sidecar that belongs to a library CSV (same stem, ``.json``)."""
    return Path(path).with_suffix(".json")


def _sidecar_label(path: Path) -> str:
    return f"{sidecar_path(path)} (sidecar of {path})"


def _read_sidecar(path: Path) -> dict:
    sc = sidecar_path(path)
    label = _sidecar_label(path)
    if not sc.exists():
        return {}
    try:
        text = sc.read_text(encoding="utf-8")
    except OSError as exc:
        raise LibraryReadError(f"cannot open {label}: {exc.strerror or exc}") from None
    try:
        meta = json.loads(text)
    except json.JSONDecodeError as exc:
        raise LibraryFormatError(f"{label}, line {exc.lineno}, column {exc.colno}: not valid JSON ({exc.msg})") from None
    if not isinstance(meta, dict):
        raise LibraryFormatError(f"{label}: the sidecar must hold one JSON object {{...}}")
    return meta


def _wavelength_factor(path: Path, header: str, meta: dict) -> float:
    sc = _sidecar_label(path)
    units = meta.get("units")
    ufac = None
    if units is not None:
        ufac = _UNITS.get(str(units).strip().lower())
        if ufac is None:
            raise LibraryFormatError(f"{sc}: units {units!r} not understood; use \"nm\" or \"um\"")
    h = header.strip().lower()
    if h in _WL_HEADERS:
        fac = _WL_HEADERS[h]
        if ufac is not None and ufac != fac:
            raise LibraryFormatError(
                f"{path}, line 1, column {header}: header unit disagrees with units {units!r} in {sc}; "
                "make them agree"
            )
        return fac
    if h == "wavelength" and ufac is not None:
        return ufac
    raise LibraryFormatError(
        f"{path}, line 1, column 1: first column must be wavelength_nm or wavelength_um, found {header!r}"
    )


def read_library(path: str | os.PathLike) -> SpectralLibrary:
    """Read a library CSV (and its JSON sidecar if present), validating the format.

    Parameters
    ----------
    path : str or path-like
        The library CSV (format in the module docstring).

    Returns
    -------
    SpectralLibrary
        Wavelengths [nm], reflectance 0..1 (after ``reflectance_scale``), names, classes from the
        sidecar, band names for a resampled library, and the sidecar's other keys as metadata
        (plus ``path``).

    Raises
    ------
    LibraryReadError
        The file does not exist or cannot be opened.
    LibraryFormatError
        The content breaks the format; the message names file, line and column.

    Examples
    --------
    >>> from unmix.io.library import shipped_library_path
    >>> lib = read_library(shipped_library_path("demo_library"))
    >>> lib.names[:2], lib.classes[2], float(lib.wavelengths[0])
    (('green_vegetation', 'dry_vegetation'), 'soil', 400.0)
    """
    path = Path(path)
    rows = _read_rows(path)
    meta = _read_sidecar(path)
    sc = _sidecar_label(path)
    hline, header = rows[0]
    factor = _wavelength_factor(path, header[0], meta)
    has_band = len(header) > 1 and header[1].strip().lower() == "band"
    first = 2 if has_band else 1
    names = header[first:]
    if not names:
        raise LibraryFormatError(f"{path}, line {hline}: no spectrum columns after {', '.join(header[:first])}")
    seen: dict[str, int] = {}
    for k, n in enumerate(names, start=first + 1):
        if not n:
            raise LibraryFormatError(f"{path}, line {hline}, column {k}: empty spectrum name; name every column")
        if n in seen:
            raise LibraryFormatError(
                f"{path}, line {hline}, column {k}: spectrum name {n!r} repeats column {seen[n]}; names must be unique"
            )
        seen[n] = k
    scale, add = _scaling(meta, sc)
    if len(rows) < 2:
        raise LibraryFormatError(f"{path}: no data lines after the header")
    ncol = len(header)
    wl = np.empty(len(rows) - 1)
    values = np.empty((len(rows) - 1, len(names)))
    bands: list[str] = []
    lines: list[int] = []
    lo, hi = REFLECTANCE_RANGE
    for i, (line, cells) in enumerate(rows[1:]):
        if len(cells) > ncol and any(cells[ncol:]):
            raise LibraryFormatError(
                f"{path}, line {line}: {len(cells)} cells but the header has {ncol} columns; remove the extra cells"
            )
        cells = cells + [""] * (ncol - len(cells))
        wl[i] = _parse_float(path, line, header[0], cells[0]) * factor
        if has_band:
            if not cells[1]:
                raise LibraryFormatError(f"{path}, line {line}, column band: missing band name")
            if cells[1] in bands:
                raise LibraryFormatError(
                    f"{path}, line {line}, column band: band {cells[1]!r} already on line "
                    f"{lines[bands.index(cells[1])]}; band names must be unique"
                )
            bands.append(cells[1])
        elif i > 0 and wl[i] <= wl[i - 1]:
            what = "repeats" if wl[i] == wl[i - 1] else "is smaller than"
            raise LibraryFormatError(
                f"{path}, line {line}, column {header[0]}: wavelength {cells[0]} {what} the one on line "
                f"{lines[-1]}; wavelengths must increase strictly"
            )
        for j, n in enumerate(names):
            v = _parse_float(path, line, n, cells[first + j]) * scale + add
            if not lo <= v <= hi:
                hint = "" if (scale, add) != (1, 0) else ("; if the values are percent or scaled integers set "
                                                          "scale_factor (0.01 or 0.0001) in the sidecar")
                raise LibraryFormatError(
                    f"{path}, line {line}, column {n}: reflectance {v:g} outside the allowed {lo:g}..{hi:g}{hint}"
                )
            values[i, j] = v
        lines.append(line)
    if has_band and wl.size and np.any(wl <= 0):
        k = int(np.flatnonzero(wl <= 0)[0])
        raise LibraryFormatError(f"{path}, line {lines[k]}, column {header[0]}: band centre must be positive")

    spectra_meta = meta.get("spectra", {})
    if not isinstance(spectra_meta, dict):
        raise LibraryFormatError(f"{sc}: \"spectra\" must be an object {{name: {{\"class\": ...}}}}")
    unknown = [n for n in spectra_meta if n not in seen]
    if unknown:
        raise LibraryFormatError(
            f"{sc}: \"spectra\" describes {', '.join(map(repr, unknown))}, not columns of {path} "
            f"({', '.join(names)}); fix the names"
        )
    classes = []
    for n in names:
        entry = spectra_meta.get(n, {})
        if not isinstance(entry, dict):
            raise LibraryFormatError(f"{sc}: \"spectra\" entry for {n!r} must be an object")
        c = entry.get("class")
        classes.append(None if c in (None, "") else str(c))
    md = {k: v for k, v in meta.items() if k not in ("units", "reflectance_scale", "scale_factor", "add_offset")}
    md["path"] = str(path)
    return SpectralLibrary(
        wl,
        values.T,
        tuple(names),
        tuple(classes),
        tuple(bands) if has_band else None,
        md,
    )


def _scaling(meta: dict, sidecar: object) -> tuple[float, float]:
    """(scale_factor, add_offset) of the sidecar: reflectance = stored value x scale_factor + add_offset.

    The names and their meaning follow the CF conventions (section 8.1, packed data). The key
    ``reflectance_scale`` of earlier releases (stored values were divided by it) is still read, with a
    :class:`~unmix.errors.DeprecatedKeyWarning`, as ``scale_factor = 1 / reflectance_scale``.
    """
    import warnings

    from ...errors import DeprecatedKeyWarning

    def number(key: str, default: float, positive: bool) -> float:
        value = meta.get(key, default)
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value) or (
                positive and not value > 0):
            kind = "a positive number" if positive else "a number"
            raise LibraryFormatError(f"{sidecar}: {key} must be {kind}, got {value!r}")
        return float(value)

    if "reflectance_scale" in meta:
        if "scale_factor" in meta:
            raise LibraryFormatError(f"{sidecar}: both scale_factor and the old reflectance_scale are set; keep only "
                                     "scale_factor (reflectance = stored value x scale_factor + add_offset)")
        old = number("reflectance_scale", 1, True)
        warnings.warn(DeprecatedKeyWarning(
            f"{sidecar}: the key reflectance_scale (stored values divided by it) is deprecated and will not be read "
            f"after this release; write \"scale_factor\": {1 / old:g} instead (stored values are multiplied by it, "
            "as in CF)"), stacklevel=3)
        return 1.0 / old, number("add_offset", 0, False)
    return number("scale_factor", 1, True), number("add_offset", 0, False)

