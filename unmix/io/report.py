"""A report folder: the HTML page, its tables as CSV and its figures as PNG, committed together; and the
report's own inputs (points to plot, the tables of an assessment)."""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

import pandas as pd

from .products.claim import ProductSet

__all__ = ["read_assessment", "read_points", "report_paths", "write_points", "write_report"]


def report_paths(out_dir: str | os.PathLike, tables: list[str], figures: list[str] = ()) -> list[Path]:
    """The files :func:`write_report` writes into ``out_dir`` (the page first, then the tables, then the
    figures under ``figures/``)."""
    out = Path(out_dir)
    return ([out / "report.html"] + [out / f"{name}.csv" for name in tables]
            + [out / "figures" / f"{name}.png" for name in figures])


def write_report(
    page: str, tables: dict[str, pd.DataFrame], out_dir: str | os.PathLike, *, overwrite: bool = False,
    products: ProductSet | None = None, figures: dict[str, bytes] | None = None,
) -> list[Path]:
    """Write ``report.html``, one CSV per table and one PNG per figure (``figures/``) into ``out_dir``, as
    one set of products.

    Every file is claimed before anything is written, so an existing report without ``overwrite``
    leaves the folder untouched (:class:`~unmix.errors.OutputExistsError`), and the page and the
    tables appear together or not at all (see :mod:`unmix.io.products.claim`). With ``products``
    (a set the caller claimed, holding these paths) the files join that set instead.
    """
    figures = figures or {}
    paths = report_paths(out_dir, list(tables), list(figures))
    if figures:
        (Path(out_dir) / "figures").mkdir(parents=True, exist_ok=True)
    with contextlib.ExitStack() as stack:
        if products is None:
            products = stack.enter_context(ProductSet(paths, overwrite=overwrite))
        else:
            products.claim_more(paths)  # a table the caller did not foresee joins the set
        with products.writing(paths[0]) as tmp:
            tmp.write_text(page, encoding="utf-8")
        for path, df in zip(paths[1:], tables.values()):
            with products.writing(path) as tmp:
                df.to_csv(tmp, index=False, float_format="%.4f")
        for path, data in zip(paths[1 + len(tables):], figures.values()):
            with products.writing(path) as tmp:
                tmp.write_bytes(data)
    return paths


def read_points(path: str | os.PathLike) -> dict[str, tuple[float, float]]:
    """Points to plot as time series: a CSV with columns ``name``, ``x``, ``y`` (in the products' CRS).

    Raises
    ------
    InputError
        A missing column, a coordinate that is not a number, or a repeated name (the line is named).
    """
    from ..errors import InputError, StackReadError

    path = Path(path)
    try:
        table = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (OSError, pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise StackReadError(f"cannot read the points file {path}: {exc}") from None
    missing = [c for c in ("name", "x", "y") if c not in table.columns]
    if missing:
        raise InputError(f"{path}: the points file needs the columns name, x, y (in the products' CRS); "
                         f"missing {', '.join(missing)}")
    out: dict[str, tuple[float, float]] = {}
    for i, row in table.iterrows():
        try:
            xy = (float(row["x"]), float(row["y"]))
        except ValueError:
            raise InputError(f"{path}, line {i + 2}: x and y must be numbers, got {row['x']!r}, {row['y']!r}") from None
        if row["name"] in out:
            raise InputError(f"{path}, line {i + 2}: the point name {row['name']!r} is used twice")
        out[str(row["name"])] = xy
    if not out:
        raise InputError(f"{path}: the points file has no rows")
    return out


def read_assessment(folder: str | os.PathLike) -> dict[str, pd.DataFrame]:
    """The tables ``unmix assess`` wrote into ``folder`` (accuracy.csv, overall.csv, error_matrix.csv)."""
    from ..errors import InputError

    folder = Path(folder)
    names = {"accuracy": "accuracy.csv", "overall": "overall.csv", "error_matrix": "error_matrix.csv"}
    if not (folder / names["accuracy"]).is_file():
        raise InputError(f"{folder} holds no accuracy.csv: give the folder 'unmix assess' wrote (its --out)")
    return {key: pd.read_csv(folder / name) for key, name in names.items() if (folder / name).is_file()}


def write_points(points: dict[str, tuple[float, float]], path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write points (name -> (x, y)) as the CSV :func:`read_points` reads, atomically."""
    from .products.atomic import atomic_path

    table = pd.DataFrame({"name": list(points), "x": [p[0] for p in points.values()],
                          "y": [p[1] for p in points.values()]})
    with atomic_path(path, overwrite=overwrite) as tmp:
        table.to_csv(tmp, index=False)
    return Path(path)
