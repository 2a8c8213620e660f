"""Shared cell reading of the library and response CSV files: rows with line numbers, numbers, headers."""

from __future__ import annotations

import csv
import math
from pathlib import Path

from ...errors import LibraryFormatError, LibraryReadError

#: First-column headers and their factor to nanometres.
_WL_HEADERS = {"wavelength_nm": 1.0, "wavelength_um": 1000.0}


def _read_rows(path: Path, what: str = "library") -> list[tuple[int, list[str]]]:
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
        raise LibraryReadError(f"{what} file {path} does not exist; check the path") from None
    except UnicodeDecodeError as exc:
        raise LibraryFormatError(f"{path}: not UTF-8 text ({exc}); save the file as UTF-8 CSV") from None
    except IsADirectoryError:
        raise LibraryReadError(f"{path} is a folder, not a {what} CSV file") from None
    except OSError as exc:
        raise LibraryReadError(f"cannot open {what} file {path}: {exc.strerror or exc}") from None
    if not rows:
        raise LibraryFormatError(f"{path}: the file is empty; expected a header line starting with wavelength_nm")
    return rows


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
