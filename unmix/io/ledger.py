"""The date ledger as a CSV file beside the products, and inside NetCDF products.

CSV layout (one row per date, a header row, comma separated, UTF-8)::

    date,doy,sensor,product,valid_share,shift_y,shift_x,shift_sd,gain_<band>...,offset_<band>...,r2_<band>...,used,reason

``date`` is ISO 8601 (``YYYY-MM-DD``, with a time of day only when a date has one); numbers are
written as numbers with the fewest digits that read back to the same float32 value, an empty cell is
"not known" (NaN); ``used`` is ``true`` / ``false``. Columns of parts the ledger lacks are left out.

In a product the ledger's variables are prefixed with ``date_`` (``date_valid_share``, ``date_gain``
on (time, ledger_band), ...) and carry a ``ledger_name`` attribute, so :func:`ledger_from_product`
finds them again; ``used`` is stored as int8 0/1 with CF ``flag_values``.
"""

from __future__ import annotations

import csv
import os
from pathlib import Path

import numpy as np
import xarray as xr

from ..cube.ledger import _FLOAT, _TEXT, LEDGER_BAND_VARIABLES, build_ledger
from ..errors import InputError, StackReadError
from .products.atomic import atomic_path
from .products.claim import ProductSet

__all__ = ["write_ledger_csv", "read_ledger_csv", "ledger_variables", "ledger_from_product", "find_ledger", "ledger_variable_names",
           "LEDGER_PREFIX"]

#: Prefix of the ledger's variables inside a product.
LEDGER_PREFIX = "date_"
_BAND_DIM = "ledger_band"
#: Ledger attributes carried into products (on the ``used`` variable, prefixed ``ledger_``): the one-line
#: verdict per condition, the reference date and the band the shifts were measured on.
_CARRIED_ATTRS = ("verdicts", "reference_date", "registration_band")


def _number(value) -> str:
    v = np.float32(value)
    return "" if np.isnan(v) else np.format_float_positional(v, unique=True, trim="-")


def _date_text(times: np.ndarray) -> list[str]:
    t = times.astype("datetime64[s]")
    unit = "D" if (t == t.astype("datetime64[D]")).all() else "s"
    return [str(np.datetime_as_string(x, unit=unit)) for x in t]


def _columns(ledger: xr.Dataset) -> list[tuple[str, list[str]]]:
    cols: list[tuple[str, list[str]]] = [("date", _date_text(ledger["time"].values)),
                                         ("doy", [str(int(v)) for v in ledger["doy"].values])]
    for name in ("sensor", "product"):
        if name in ledger:
            cols.append((name, [str(v) for v in ledger[name].values]))
    for name in _FLOAT:
        if name in ledger:
            cols.append((name, [_number(v) for v in ledger[name].values]))
    for name in LEDGER_BAND_VARIABLES:
        if name in ledger:
            for j, band in enumerate(ledger["band"].values):
                cols.append((f"{name}_{band}", [_number(v) for v in ledger[name].values[:, j]]))
    cols.append(("used", ["true" if v else "false" for v in ledger["used"].values]))
    cols.append(("reason", [str(v) for v in ledger["reason"].values]))
    return cols


def write_ledger_csv(ledger: xr.Dataset, path: str | os.PathLike, *, overwrite: bool = False,
                     products: ProductSet | None = None) -> Path:
    """Write a ledger (:func:`unmix.cube.ledger.build_ledger`) as CSV, atomically.

    Parameters
    ----------
    ledger : xarray.Dataset
    path : path
        Destination (``dates.csv`` beside the products, say).
    overwrite : bool
        Replace an existing file (else :class:`~unmix.errors.OutputExistsError`).
    products : ProductSet, optional
        A claimed set the file joins (committed with the other products).

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from unmix.cube.ledger import build_ledger
    >>> led = build_ledger(np.array(["2020-01-05"], "datetime64[ns]"), valid_share=[0.25])
    >>> out = write_ledger_csv(led, pathlib.Path(tempfile.mkdtemp()) / "dates.csv")
    >>> out.read_text().splitlines()
    ['date,doy,valid_share,used,reason', '2020-01-05,5,0.25,true,']
    """
    path = Path(path)
    if not isinstance(ledger, xr.Dataset) or "time" not in ledger.dims or "used" not in ledger:
        raise InputError("write_ledger_csv needs a ledger Dataset on time (build it with unmix.cube.ledger.build_ledger)")
    cols = _columns(ledger)
    with atomic_path(path, overwrite=overwrite, products=products) as tmp:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            writer = csv.writer(fh, lineterminator="\n")
            writer.writerow([name for name, _ in cols])
            writer.writerows(zip(*(values for _, values in cols)))
    return path


def read_ledger_csv(path: str | os.PathLike) -> xr.Dataset:
    """Read a ledger CSV written by :func:`write_ledger_csv` back into the same Dataset.

    Raises
    ------
    StackReadError
        The file is missing or cannot be read.
    InputError
        A cell breaks the layout (the file, line and column are named).
    """
    path = Path(path)
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            rows = list(csv.reader(fh))
    except (OSError, UnicodeDecodeError) as exc:
        raise StackReadError(f"cannot read the date ledger {path}: {exc}") from None
    if not rows or "date" not in rows[0] or "used" not in rows[0]:
        raise InputError(f"{path} is not a date ledger: its header needs at least the columns date and used")
    header, body = rows[0], rows[1:]
    for i, row in enumerate(body, start=2):
        if len(row) != len(header):
            raise InputError(f"{path} line {i}: {len(row)} cells, the header has {len(header)}")
    table = {name: [row[j] for row in body] for j, name in enumerate(header)}

    def cells(name, parse):
        out = []
        for i, text in enumerate(table[name], start=2):
            try:
                out.append(parse(text))
            except ValueError:
                raise InputError(f"{path} line {i} column {name}: cannot read {text!r}") from None
        return out

    parts: dict = {}
    parts["time"] = np.array(cells("date", lambda s: np.datetime64(s, "ns")), dtype="datetime64[ns]")
    for name in _TEXT:
        if name in table:
            parts[name] = table[name]
    for name in _FLOAT:
        if name in table:
            parts[name] = np.array(cells(name, _parse_number), np.float32)
    bands: list[str] = []
    for name in LEDGER_BAND_VARIABLES:
        names = [c for c in header if c.startswith(name + "_")]
        if not names:
            continue
        these = [c[len(name) + 1:] for c in names]
        if bands and these != bands:
            raise InputError(f"{path}: the bands of {name} ({', '.join(these)}) differ from {', '.join(bands)}")
        bands = these
        parts[name] = np.stack([np.array(cells(c, _parse_number), np.float32) for c in names], axis=1) \
            if body else np.zeros((0, len(names)), np.float32)
    parts["used"] = np.array(cells("used", _parse_bool), bool)
    return build_ledger(parts.pop("time"), bands=bands or None, **parts)


def _parse_number(text: str) -> float:
    return float("nan") if text.strip() == "" else float(text)


def _parse_bool(text: str) -> bool:
    t = text.strip().lower()
    if t in ("true", "1", "yes"):
        return True
    if t in ("false", "0", "no"):
        return False
    raise ValueError(text)


def ledger_variables(ledger: xr.Dataset, *, dim: str = "time") -> xr.Dataset:
    """The ledger as variables to merge into a product Dataset (``product.update(...)`` / ``xr.merge``).

    Names get the prefix ``date_``; the band dimension becomes ``ledger_band``; ``used`` becomes int8
    0/1 with CF flag attributes (NetCDF has no bool). ``dim`` renames the ledger's ``time``, for a
    product whose own ``time`` holds only the used dates (the ledger holds every date).

    Examples
    --------
    >>> from unmix.cube.ledger import build_ledger
    >>> led = build_ledger(np.array(["2020-01-05"], "datetime64[ns]"), valid_share=[0.25])
    >>> sorted(ledger_variables(led).data_vars)
    ['date_doy', 'date_reason', 'date_used', 'date_valid_share']
    """
    out = xr.Dataset()
    for name, var in ledger.data_vars.items():
        attrs = {**var.attrs, "ledger_name": name}
        data = var
        if name == "used":
            data = var.astype(np.int8)
            attrs.update(flag_values=np.array([0, 1], np.int8), flag_meanings="not_used used")
        out[LEDGER_PREFIX + name] = data.assign_attrs(attrs)
    carried = {k: v for k, v in ledger.attrs.items() if k in _CARRIED_ATTRS}
    if carried and LEDGER_PREFIX + "used" in out:
        out[LEDGER_PREFIX + "used"].attrs.update(
            {f"ledger_{k}": "\n".join(v) if isinstance(v, (list, tuple)) else str(v) for k, v in carried.items()})
    if "band" in out.dims:
        out = out.rename({"band": _BAND_DIM})
    if dim != "time":
        out = out.rename({"time": dim})
    return out


def ledger_variable_names(ds: xr.Dataset) -> list[str]:
    """Names of the ledger variables a product carries (:func:`ledger_variables`); empty when it has none."""
    return [k for k, v in ds.data_vars.items() if "ledger_name" in v.attrs]


def ledger_from_product(ds: xr.Dataset) -> xr.Dataset:
    """The ledger carried in a product (:func:`ledger_variables`), back as :func:`build_ledger` gives it.

    Only the ledger's variables are read: a lazily opened product's cube stays on disk.

    Raises
    ------
    InputError
        The product carries no ledger.
    """
    names = {str(ds[k].attrs["ledger_name"]): k for k in ledger_variable_names(ds)}
    if "used" not in names:
        raise InputError("the product carries no date ledger (no variable with ledger_name = 'used'); write it again "
                         "with a version of unmix that records the ledger")
    dim = ds[names["used"]].dims[0]
    parts: dict = {}
    for name, var in names.items():
        if name == "doy":
            continue
        values = ds[var].values
        if name in _TEXT:
            values = values.astype(str)
        parts[name] = values
    parts["used"] = parts["used"].astype(bool)
    bands = [str(b) for b in ds[_BAND_DIM].values] if _BAND_DIM in ds.coords else None
    ledger = build_ledger(ds[dim].values, bands=bands if any(n in parts for n in LEDGER_BAND_VARIABLES) else None,
                          **parts)
    used_attrs = ds[names["used"]].attrs
    for key in _CARRIED_ATTRS:
        if f"ledger_{key}" in used_attrs:
            value = str(used_attrs[f"ledger_{key}"])
            ledger.attrs[key] = value.split("\n") if key == "verdicts" else value
    return ledger


def find_ledger(path: str | os.PathLike) -> xr.Dataset | None:
    """The ledger of a product or product folder at ``path``; None when ``path`` holds none (an input stack).

    A NetCDF file carrying ledger variables (``fractions.nc``, ``trends.nc``) gives its ledger, with the
    verdicts and reference date it was written with; a folder gives the ledger of its ``fractions.nc``,
    else of its ``trends.nc``, else its ``dates.csv``.
    """
    from .products import open_product

    path = Path(path)
    candidates = [path] if path.is_file() else [path / "fractions.nc", path / "trends.nc"]
    for nc in candidates:
        if nc.suffix.lower() != ".nc" or not nc.is_file():
            continue
        ds = open_product(nc)  # lazy: only the ledger's variables are read
        try:
            if ledger_variable_names(ds):
                return ledger_from_product(ds)
        finally:
            ds.close()
    if path.is_dir() and (path / "dates.csv").is_file():
        return read_ledger_csv(path / "dates.csv")
    return None
