"""Writing a report folder: the HTML page and its area tables as CSV, committed together."""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

import pandas as pd

from .products.claim import ProductSet

__all__ = ["report_paths", "write_report"]


def report_paths(out_dir: str | os.PathLike, tables: list[str]) -> list[Path]:
    """The files :func:`write_report` writes into ``out_dir`` (the page first)."""
    out = Path(out_dir)
    return [out / "report.html"] + [out / f"{name}.csv" for name in tables]


def write_report(
    page: str, tables: dict[str, pd.DataFrame], out_dir: str | os.PathLike, *, overwrite: bool = False,
    products: ProductSet | None = None,
) -> list[Path]:
    """Write ``report.html`` and one CSV per table into ``out_dir``, as one set of products.

    Every file is claimed before anything is written, so an existing report without ``overwrite``
    leaves the folder untouched (:class:`~unmix.errors.OutputExistsError`), and the page and the
    tables appear together or not at all (see :mod:`unmix.io.products.claim`). With ``products``
    (a set the caller claimed, holding these paths) the files join that set instead.
    """
    paths = report_paths(out_dir, list(tables))
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
    return paths
