"""``unmix report``: an HTML report with maps and area tables from trend (and fraction) products."""

from __future__ import annotations

from pathlib import Path

import click

from ._common import claim_products, echo_summary, overwrite_option, writes_products

#: Tables written beside report.html (the names of build_report's tables).
_TABLES = ["trajectory_areas", "rule_areas", "dates"]


@click.command("report")
@click.argument("trends", type=click.Path(path_type=Path), metavar="TRENDS.nc")
@click.option("--fractions", "fractions", type=click.Path(path_type=Path), default=None, metavar="FRACTIONS.nc",
              help="The fractions product the trends came from; adds fraction maps of the first and last date "
                   "and the model-fit summary. Must be on the same grid and dates as TRENDS.nc.")
@click.option("--out", "out", type=click.Path(file_okay=False, path_type=Path), default="report",
              show_default=True, help="Folder for report.html, trajectory_areas.csv and rule_areas.csv.")
@click.option("--title", default="Land-cover fractions and their trends", show_default=True,
              help="Title of the report.")
@overwrite_option
@writes_products
def report(trends: Path, fractions: Path | None, out: Path, title: str, overwrite: bool) -> None:
    """Write a self-contained HTML report of TRENDS.nc: trajectory maps, area tables per trajectory and
    per modification rule [ha and % of the pixels with enough dates], provenance and the caution.
    """
    from ..errors import InputError
    from ..io.products import open_product
    from ..io.products.consistency import check_same_scene
    from ..io.report import report_paths, write_report
    from ..report import build_report

    # claimed before any input is read: a busy, existing or unwritable report stops the run here
    products = claim_products(report_paths(out, _TABLES), overwrite)
    trend_ds = open_product(trends)
    if "trajectory" not in trend_ds:
        raise InputError(f"{trends} holds no 'trajectory' variable; give a product of 'unmix trends'")
    fraction_ds = open_product(fractions) if fractions is not None else None
    if fraction_ds is not None:
        check_same_scene(trend_ds, fraction_ds, str(trends), str(fractions))
    page, tables = build_report(fraction_ds, trend_ds.load(), title=title)
    written = write_report(page, tables, out, overwrite=overwrite, products=products)
    products.commit()  # the page and its tables appear together
    echo_summary(f"report: {written[0]} (+ {len(written) - 1} CSV tables)")
