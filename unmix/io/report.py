"""Writing a report folder: the HTML page and its area tables as CSV, each written atomically."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd

from ..errors import OutputExistsError
from .products import atomic_path

__all__ = ["report_paths", "write_report"]


def report_paths(out_dir: str | os.PathLike, tables: list[str]) -> list[Path]:
    """The files :func:`write_report` writes into ``out_dir`` (the page first)."""
    out = Path(out_dir)
    return [out / "report.html"] + [out / f"{name}.csv" for name in tables]


def write_report(
    page: str, tables: dict[str, pd.DataFrame], out_dir: str | os.PathLike, *, overwrite: bool = False
) -> list[Path]:
    """Write ``report.html`` and one CSV per table into ``out_dir``.

    Every target is checked before anything is written, so an existing report without ``overwrite``
    leaves the folder untouched (:class:`~unmix.errors.OutputExistsError`).
    """
    paths = report_paths(out_dir, list(tables))
    existing = [str(p) for p in paths if p.exists()]
    if existing and not overwrite:  # fail before writing anything
        raise OutputExistsError(f"{', '.join(existing)} exist(s) already; pass --overwrite to replace")
    with atomic_path(paths[0], overwrite=overwrite) as tmp:
        tmp.write_text(page, encoding="utf-8")
    for path, df in zip(paths[1:], tables.values()):
        with atomic_path(path, overwrite=overwrite) as tmp:
            df.to_csv(tmp, index=False, float_format="%.4f")
    return paths
