"""Read tabulated spectral responses (one column per band) and build a sensor from them.

The format is described in :mod:`unmix.io.library`.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ...errors import LibraryFormatError
from ...sensors import Sensor, tabulated_sensor
from ._table import _WL_HEADERS, _parse_float, _read_rows

__all__ = ["ResponseTable", "read_response", "read_response_sensor"]


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
    rows = _read_rows(path, "response")
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
        if n in names[: k - 2]:
            raise LibraryFormatError(
                f"{path}, line {hline}, column {k}: band name {n!r} repeats column {names.index(n) + 2}; "
                "band names must be unique"
            )
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
            raise LibraryFormatError(
                f"{path}, lines {rows[1][0]}-{rows[-1][0]}, column {n}: the band's response is zero everywhere; "
                "give its relative response (0..1) or drop the column"
            )
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
