"""Read and write spectral libraries and tabulated spectral responses.

Library file format
-------------------
A library is a comma-separated text file (UTF-8) with one row per wavelength and one column per
spectrum::

    wavelength_nm,green_vegetation,bright_soil
    400,0.0412,0.1503
    410,0.0420,0.1551
    ...

* The first column is ``wavelength_nm`` (nanometres) or ``wavelength_um`` (micrometres, converted to
  nm on reading). Wavelengths must increase strictly.
* Every other column is one spectrum; its header is the spectrum name (unique, non-empty). Values are
  reflectance 0..1 (see ``reflectance_scale`` below).
* A **resampled** library (values per sensor band) has a text column ``band`` right after the
  wavelength column; the wavelength is then the band centre [nm], rows follow the chosen band order
  (wavelengths need not increase) and band names must be unique.
* Blank lines and lines starting with ``#`` are ignored; every other cell must hold a number.

Optional JSON sidecar with the same stem (``library.csv`` -> ``library.json``)::

    {"units": "nm", "reflectance_scale": 1, "source": "...", "invented": true,
     "description": "...", "sensor": "landsat-8-oli",
     "spectra": {"green_vegetation": {"class": "green_vegetation", "description": "..."}}}

``units`` must agree with the wavelength header (``nm`` or ``um``); ``reflectance_scale`` divides every
value on reading (10000 for integers scaled by 10 000, 100 for percent); ``sensor`` names the sensor of
a resampled library; ``spectra`` gives a class label (endmember bundle) and a description per spectrum.
Other keys are kept as metadata.

Validation rule for reflectance: after scaling every value must lie in [-0.05, 1.5]. Small negative
values occur in calibrated field spectra; anything above 1.5 almost always means the scale is wrong.
Every failure raises :class:`unmix.errors.LibraryFormatError` naming the file, the line (1-based, as an
editor shows it) and the column. A missing file raises :class:`unmix.errors.LibraryReadError`.

Response file format
--------------------
A tabulated spectral response is a CSV with first column ``wavelength_nm`` (or ``wavelength_um``) and one
column per band (header = band name) holding the relative response 0..1 (any positive scale is divided
by the band's maximum). Read it with :func:`read_response` and build a sensor with
:func:`read_response_sensor` or :func:`unmix.sensors.tabulated_sensor`.
"""

from __future__ import annotations

import csv
import json
import math
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import LibraryFormatError, LibraryReadError, OutputExistsError
from ..sensors import Sensor, tabulated_sensor
from ..spectra import SpectralLibrary

__all__ = [
    "REFLECTANCE_RANGE",
    "ResponseTable",
    "read_library",
    "write_library",
    "read_response",
    "read_response_sensor",
    "sidecar_path",
    "shipped_library_path",
    "read_shipped_library",
]

#: Allowed reflectance after scaling, inclusive.
REFLECTANCE_RANGE = (-0.05, 1.5)

_WL_HEADERS = {"wavelength_nm": 1.0, "wavelength_um": 1000.0}
_UNITS = {"nm": 1.0, "nanometre": 1.0, "nanometer": 1.0, "um": 1000.0, "µm": 1000.0, "micrometre": 1000.0,
          "micrometer": 1000.0}


def sidecar_path(path: str | os.PathLike) -> Path:
    """The JSON sidecar that belongs to a library CSV (same stem, ``.json``)."""
    return Path(path).with_suffix(".json")


def _read_rows(path: Path) -> list[tuple[int, list[str]]]:
    try:
        with open(path, newline="", encoding="utf-8-sig") as f:
            reader = csv.reader(f)
            rows = []
            try:
                for cells in reader:
                    cells = [c.strip() for c in cells]
                    if not any(cells) or cells[0].startswith("#"):
                        continue
                    rows.append((reader.line_num, cells))
            except csv.Error as exc:
                raise LibraryFormatError(f"{path}, line {reader.line_num}: not valid CSV ({exc})") from None
    except FileNotFoundError:
        raise LibraryReadError(f"library file {path} does not exist; check the path") from None
    except UnicodeDecodeError as exc:
        raise LibraryFormatError(f"{path}: not UTF-8 text ({exc}); save the file as UTF-8 CSV") from None
    except IsADirectoryError:
        raise LibraryReadError(f"{path} is a folder, not a library CSV file") from None
    except OSError as exc:
        raise LibraryReadError(f"cannot open library file {path}: {exc.strerror or exc}") from None
    if not rows:
        raise LibraryFormatError(f"{path}: the file is empty; expected a header line starting with wavelength_nm")
    return rows


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


def _parse_float(path: Path, line: int, column: str, cell: str) -> float:
    if cell == "":
        raise LibraryFormatError(f"{path}, line {line}, column {column}: missing value; fill every cell")
    try:
        v = float(cell)
    except ValueError:
        raise LibraryFormatError(f"{path}, line {line}, column {column}: {cell!r} is not a number") from None
    if not math.isfinite(v):
        raise LibraryFormatError(f"{path}, line {line}, column {column}: {cell!r} is not a finite number")
    return v


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
    scale = meta.get("reflectance_scale", 1)
    if isinstance(scale, bool) or not isinstance(scale, (int, float)) or not scale > 0:
        raise LibraryFormatError(f"{sc}: reflectance_scale must be a positive number, got {scale!r}")
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
            v = _parse_float(path, line, n, cells[first + j]) / scale
            if not lo <= v <= hi:
                hint = "" if scale != 1 else "; if the values are percent or scaled integers set reflectance_scale (100 or 10000) in the sidecar"
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
    md = {k: v for k, v in meta.items() if k not in ("units", "reflectance_scale")}
    md["path"] = str(path)
    return SpectralLibrary(
        wl,
        values.T,
        tuple(names),
        tuple(classes),
        tuple(bands) if has_band else None,
        md,
    )


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

    md = {k: v for k, v in library.metadata.items() if k not in ("path", "spectra", "units", "reflectance_scale")}
    old_spectra = library.metadata.get("spectra", {}) or {}
    spectra = {}
    for n, c in zip(library.names, library.classes):
        entry = dict(old_spectra.get(n, {})) if isinstance(old_spectra.get(n, {}), dict) else {}
        entry.pop("class", None)
        spectra[n] = ({"class": c} if c is not None else {}) | entry
    meta = {"units": "nm", "reflectance_scale": 1}
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


@dataclass(frozen=True)
class ResponseTable:
    """Tabulated relative spectral responses read from a file.

    Attributes
    ----------
    wavelengths_nm : (n_wl,) ndarray
        Strictly increasing wavelengths [nm].
    band_names : tuple of str
        One name per band.
    responses : (n_bands, n_wl) ndarray
        Relative response (each band scaled to a maximum of 1).
    path : str
        The file read.
    """

    wavelengths_nm: np.ndarray
    band_names: tuple[str, ...]
    responses: np.ndarray
    path: str


def read_response(path: str | os.PathLike) -> ResponseTable:
    """Read a tabulated spectral-response CSV (format in the module docstring).

    Values must be >= 0 (tiny negatives down to -0.01 from noisy measurements are set to 0), and each
    band needs a positive value somewhere; each band is divided by its maximum.
    """
    path = Path(path)
    rows = _read_rows(path)
    hline, header = rows[0]
    h = header[0].strip().lower()
    if h not in _WL_HEADERS:
        raise LibraryFormatError(
            f"{path}, line {hline}, column 1: first column must be wavelength_nm or wavelength_um, found {header[0]!r}"
        )
    factor = _WL_HEADERS[h]
    names = header[1:]
    if not names:
        raise LibraryFormatError(f"{path}, line {hline}: no band columns after {header[0]}")
    for k, n in enumerate(names, start=2):
        if not n:
            raise LibraryFormatError(f"{path}, line {hline}, column {k}: empty band name")
        if names.count(n) > 1:
            raise LibraryFormatError(f"{path}, line {hline}, column {k}: band name {n!r} repeats; names must be unique")
    if len(rows) < 3:
        raise LibraryFormatError(f"{path}: a response table needs at least two data lines")
    ncol = len(header)
    wl = np.empty(len(rows) - 1)
    resp = np.empty((len(names), len(rows) - 1))
    prev_line = None
    for i, (line, cells) in enumerate(rows[1:]):
        if len(cells) > ncol and any(cells[ncol:]):
            raise LibraryFormatError(f"{path}, line {line}: {len(cells)} cells but the header has {ncol} columns")
        cells = cells + [""] * (ncol - len(cells))
        wl[i] = _parse_float(path, line, header[0], cells[0]) * factor
        if i > 0 and wl[i] <= wl[i - 1]:
            raise LibraryFormatError(
                f"{path}, line {line}, column {header[0]}: wavelength {cells[0]} is not larger than the one on "
                f"line {prev_line}; wavelengths must increase strictly"
            )
        for j, n in enumerate(names):
            v = _parse_float(path, line, n, cells[1 + j])
            if v < -0.01:
                raise LibraryFormatError(f"{path}, line {line}, column {n}: response {v:g} is negative")
            resp[j, i] = max(v, 0.0)
        prev_line = line
    for j, n in enumerate(names):
        if not np.any(resp[j] > 0):
            raise LibraryFormatError(f"{path}, column {n}: the band's response is zero everywhere")
        resp[j] /= resp[j].max()
    return ResponseTable(wl, tuple(names), resp, str(path))


def read_response_sensor(
    path: str | os.PathLike,
    sensor_id: str | None = None,
    *,
    red: str | None = None,
    nir: str | None = None,
) -> Sensor:
    """A :class:`~unmix.sensors.Sensor` with the tabulated responses of a response CSV.

    The id defaults to the file stem; ``source`` names the file.
    """
    t = read_response(path)
    return tabulated_sensor(
        sensor_id or Path(path).stem,
        t.wavelengths_nm,
        t.responses,
        t.band_names,
        title=f"tabulated responses from {Path(path).name}",
        source=f"tabulated spectral responses read from {t.path}",
        red=red,
        nir=nir,
    )


def _endmembers_dir() -> Path:
    return Path(__file__).resolve().parents[2] / "endmembers"


def shipped_library_path(name: str = "demo_library") -> Path:
    """Path of a library shipped in the repository's top-level ``endmembers/`` folder.

    Parameters
    ----------
    name : str
        File stem, e.g. ``"demo_library"``, ``"demo_bundles"``, ``"demo_library_landsat-8-oli"``,
        ``"demo_library_sentinel-2a-msi"`` (a ``.csv`` suffix is accepted).

    Raises
    ------
    LibraryReadError
        The folder or the file is absent (the message lists the shipped names).
    """
    d = _endmembers_dir()
    stem = name[:-4] if name.lower().endswith(".csv") else name
    if not d.is_dir():
        raise LibraryReadError(
            f"the shipped library folder {d} is missing; run from a source checkout of unmix "
            "(python endmembers/make_demo_library.py regenerates the files)"
        )
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
