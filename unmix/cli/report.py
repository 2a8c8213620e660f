"""``unmix report``: an HTML report with maps and area tables from trend (and fraction) products."""

from __future__ import annotations

from pathlib import Path

import click

from ._common import echo_summary, overwrite_option


@click.command("report")
@click.argument("trends", type=click.Path(path_type=Path), metavar="TRENDS.nc")
@click.option("--fractions", "fractions", type=click.Path(path_type=Path), default=None, metavar="FRACTIONS.nc",
              help="The fractions product the trends came from; adds fraction maps of the first and last date "
                   "and the model-fit summary.")
@click.option("--out", "out", type=click.Path(file_okay=False, path_type=Path), default="report",
              show_default=True, help="Folder for report.html, trajectory_areas.csv and rule_areas.csv.")
@click.option("--title", default="Land-cover fractions and their trends", show_default=True,
              help="Title of the report.")
@overwrite_option
def report(trends: Path, fractions: Path | None, out: Path, title: str, overwrite: bool) -> None:
    """Write a self-contained HTML report of TRENDS.nc: trajectory maps, area tables per trajectory and
    per modification rule [ha and % of the pixels with enough dates], provenance and the caution.
    """
    from ..errors import OutputExistsError
    from ..io.products import open_product
    from ..io.report import report_paths, write_report
    from ..report import build_report

    targets = report_paths(out, ["trajectory_areas", "rule_areas"])
    existing = [str(p) for p in targets if p.exists()]
    if existing and not overwrite:
        raise OutputExistsError(f"{existing[0]} exists already; pass --overwrite to replace the report")
    trend_ds = open_product(trends)
    if "trajectory" not in trend_ds:
        from ..errors import InputError

        raise InputError(f"{trends} holds no 'trajectory' variable; give a product of 'unmix trends'")
    fraction_ds = open_product(fractions) if fractions is not None else None
    page, tables = build_report(fraction_ds, trend_ds.load(), title=title)
    written = write_report(page, tables, out, overwrite=overwrite)
    echo_summary(f"report: {written[0]} (+ {len(written) - 1} CSV tables)")
