"""Acquisition dates of stack files: from the file names or from a ``file,date`` CSV / mapping / list."""

from __future__ import annotations

import csv
import datetime as _dt
import os
import re
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ...errors import InputError, StackReadError

__all__ = ["date_from_name", "date_problem", "read_dates_csv", "FIRST_YEAR"]

_SEPARATED = re.compile(r"(?<!\d)(\d{4})[-_.](\d{2})[-_.](\d{2})(?!\d)")
_EIGHT = re.compile(r"(?<!\d)(\d{4})(\d{2})(\d{2})(?!\d)")
_SEVEN = re.compile(r"(?<!\d)(\d{4})(\d{3})(?!\d)")


#: No land-imaging satellite flew before Landsat 1 (launched 23 July 1972): an earlier year in a file
#: name is a misread or a placeholder, as is one after next year.
FIRST_YEAR = 1972


def _year_problem(year: int) -> str | None:
    last = _dt.date.today().year + 1
    if year < FIRST_YEAR:
        return f"year {year} is before {FIRST_YEAR} (Landsat 1, the first land-imaging satellite)"
    if year > last:
        return f"year {year} is after next year ({last})"
    return None


def _candidates(stem: str) -> list[tuple[str, np.datetime64 | None, str | None]]:
    """Every date-like run of a file name in order of precedence: (text, date or None, what is wrong)."""
    out: list[tuple[str, np.datetime64 | None, str | None]] = []
    for pattern in (_SEPARATED, _EIGHT):
        for match in pattern.finditer(stem):
            year, month, day = (int(g) for g in match.groups())
            problem = _year_problem(year)
            if problem is None and not 1 <= month <= 12:
                problem = f"month {month}"
            elif problem is None:
                days = (_dt.date(year + month // 12, month % 12 + 1, 1) - _dt.date(year, month, 1)).days
                if not 1 <= day <= days:
                    problem = f"day {day} (month {month} of {year} has {days} days)"
            date = np.datetime64(_dt.date(year, month, day), "D") if problem is None else None
            out.append((match.group(0), date, problem))
    for match in _SEVEN.finditer(stem):
        year, doy = int(match.group(1)), int(match.group(2))
        n_days = 366 if _is_leap(year) else 365
        problem = _year_problem(year)
        if problem is None and not 1 <= doy <= n_days:
            problem = f"day of year {doy} ({year} has {n_days} days)"
        date = None if problem else np.datetime64(_dt.date(year, 1, 1) + _dt.timedelta(days=doy - 1), "D")
        out.append((match.group(0), date, problem))
    return out


def _first_problem(text: str) -> tuple[str, str] | None:
    found = _candidates(text)
    if any(date is not None for _, date, _ in found):
        return None
    return next(((run, problem) for run, _, problem in found), None)


def date_problem(name: str | os.PathLike) -> str | None:
    """Why a file name holds no valid date: its first impossible date and what is wrong with it.

    None when the name holds a valid date (see :func:`date_from_name`) or nothing date-like.

    Examples
    --------
    >>> date_problem("scene_2018-13-45.tif")
    '2018-13-45 in scene_2018-13-45.tif is not a valid date: month 13'
    """
    stem = Path(name).name
    found = _first_problem(stem)
    return None if found is None else f"{found[0]} in {stem} is not a valid date: {found[1]}"


def date_from_name(name: str | os.PathLike) -> np.datetime64 | None:
    """The acquisition date in a file name, or None.

    Patterns in order of precedence: ``YYYY-MM-DD`` (``-``, ``_`` or ``.``), ``YYYYMMDD`` (exactly 8
    digits), ``YYYYDDD`` (exactly 7 digits, day of year). Only the file name is searched, not its
    folder; the first pattern that matches wins and within it the leftmost valid date.

    Parameters
    ----------
    name : str or path

    Returns
    -------
    numpy.datetime64 [D] or None

    Examples
    --------
    >>> str(date_from_name("scene_2021-03-04.tif"))
    '2021-03-04'
    >>> str(date_from_name("LC08_038037_20200115_20200823_02.tif"))
    '2020-01-15'
    >>> str(date_from_name("mosaic_2020032.tif"))
    '2020-02-01'
    >>> date_from_name("no_date_here.tif") is None
    True
    """
    for _, date, _ in _candidates(Path(name).name):
        if date is not None:
            return date
    return None


def _is_leap(year: int) -> bool:
    return year % 4 == 0 and (year % 100 != 0 or year % 400 == 0)


def _parse_date(text: Any, where: str) -> np.datetime64:
    if isinstance(text, np.datetime64):
        return text.astype("datetime64[D]")
    if isinstance(text, _dt.date):
        return np.datetime64(text, "D")
    value = str(text).strip()
    try:
        return np.datetime64(value, "D") if len(value) <= 10 else np.datetime64(value).astype("datetime64[D]")
    except ValueError:
        parsed = date_from_name(value)
        if parsed is None:
            problem = _first_problem(value)
            reason = f"{problem[0]} is not a valid date: {problem[1]}" if problem else f"cannot read {value!r} as a date"
            raise InputError(f"{where}: {reason}; write dates as YYYY-MM-DD") from None
        return parsed


def read_dates_csv(path: str | os.PathLike) -> dict[str, np.datetime64]:
    """Read a ``file,date`` CSV into a mapping file name -> date.

    Parameters
    ----------
    path : path
        CSV with a header row naming the columns ``file`` and ``date`` (other columns are ignored).
        ``file`` is a file name or path; ``date`` is ISO ``YYYY-MM-DD``.

    Returns
    -------
    dict
        Keys are the ``file`` values as written; lookups match by full path or by name.
    """
    path = Path(path)
    if not path.is_file():
        raise StackReadError(f"dates file {path} not found; give a CSV with columns file,date")
    with path.open(newline="", encoding="utf-8-sig") as fh:
        reader = csv.DictReader(fh)
        fields = [f.strip().lower() for f in (reader.fieldnames or [])]
        if "file" not in fields or "date" not in fields:
            raise InputError(
                f"dates file {path} needs a header row with columns file,date; found {reader.fieldnames}"
            )
        reader.fieldnames = fields
        out: dict[str, np.datetime64] = {}
        for line_no, row in enumerate(reader, start=2):
            name = (row.get("file") or "").strip()
            if not name:
                continue
            out[name] = _parse_date(row.get("date"), f"{path}, line {line_no}")
    return out


def _lookup_date(mapping: Mapping[str, Any], path: Path) -> Any:
    for key in (str(path), path.name, path.stem):
        if key in mapping:
            return mapping[key]
    resolved = str(path.resolve())
    for key, value in mapping.items():
        if str(Path(key).resolve()) == resolved or Path(key).name == path.name:
            return value
    return None


def _dates_for(files: Sequence[Path], dates: Any) -> list[np.datetime64]:
    if dates is None:
        out = []
        for f in files:
            d = date_from_name(f)
            problem = date_problem(f) if d is None else None
            if problem is not None:
                raise InputError(
                    f"{problem}; rename the file or give the dates as a CSV with columns file,date (--dates)"
                )
            if d is None:
                raise InputError(
                    f"no date in the file name {f.name!r} (looked for YYYY-MM-DD, YYYYMMDD, YYYYDDD); "
                    "rename the file or give the dates as a CSV with columns file,date (--dates)"
                )
            out.append(d)
        return out
    if isinstance(dates, (str, os.PathLike)):
        mapping: Mapping[str, Any] = read_dates_csv(dates)
        source = str(dates)
    elif isinstance(dates, Mapping):
        mapping = {str(k): v for k, v in dates.items()}
        source = "the dates mapping"
    else:
        seq = list(dates)
        if len(seq) != len(files):
            raise InputError(f"{len(seq)} dates given for {len(files)} files; give one date per file")
        return [_parse_date(d, f"date of {f.name}") for d, f in zip(seq, files)]
    out = []
    for f in files:
        value = _lookup_date(mapping, f)
        if value is None:
            raise InputError(f"{f.name} is not listed in {source}; add a row '{f.name},YYYY-MM-DD'")
        out.append(_parse_date(value, f"{source}, file {f.name}"))
    return out

