"""``unmix report``: an HTML report with maps, area tables, time series, accuracy and the date ledger."""

from __future__ import annotations

from pathlib import Path

import click

from ._common import claim_products, echo_summary, overwrite_option, split_names, writes_products

#: Tables always written beside report.html (others join when the products carry them).
_TABLES = ["trajectory_areas", "rule_areas", "dates", "parameters"]


@click.command("report")
@click.argument("trends", type=click.Path(path_type=Path), metavar="TRENDS.nc")
@click.option("--fractions", "fractions", type=click.Path(path_type=Path), default=None, metavar="FRACTIONS.nc",
              help="The fractions product the trends came from; adds the period fraction maps, the RGB composite, "
                   "time series and the data-quality maps. Must be on the same grid and dates as TRENDS.nc.")
@click.option("--zones", "zones_file", type=click.Path(dir_okay=False, path_type=Path), default=None, metavar="FILE",
              help="Zone polygons (GeoJSON, GeoPackage, Shapefile; any CRS) whose mean fractions are plotted over "
                   "time. Default: the zones TRENDS.nc was made with, when that file is still there.")
@click.option("--zone-field", "zone_field", default=None, metavar="NAME",
              help="Attribute of --zones holding the zone names. Default: the one TRENDS.nc was made with, else "
                   "'name'.")
@click.option("--points", "points_file", type=click.Path(dir_okay=False, path_type=Path), default=None,
              metavar="CSV", help="Points whose fraction series are plotted with their Sen line: a CSV with columns "
                                  "name, x, y in the products' CRS.")
@click.option("--assessment", "assessment_dir", type=click.Path(file_okay=False, path_type=Path), default=None,
              metavar="DIR", help="Folder written by 'unmix assess': adds accuracies and the sample-based areas with "
                                  "their 95 % confidence intervals.")
@click.option("--rmse-limit", "rmse_limit", type=click.FloatRange(min=0, min_open=True), default=0.025,
              show_default=True, help="Unmixing RMSE [reflectance] above which a pixel counts as poorly modelled.")
@click.option("--rgb", "rgb", default=None, metavar="R,G,B",
              help="Three endmembers shown as red, green and blue in the fraction composite (default: the first "
                   "three that are not shade).")
@click.option("--out", "out", type=click.Path(file_okay=False, path_type=Path), default="report",
              show_default=True, help="Folder for report.html, its CSV tables and figures/ (PNG).")
@click.option("--title", default="Land-cover fractions and their trends", show_default=True,
              help="Title of the report.")
@click.option("--pdf", is_flag=True, default=False,
              help="Also print the page to OUT/report.pdf (A4) with headless Chromium (Debian's package 'chromium'; "
                   "UNMIX_CHROMIUM may name another executable).")
@overwrite_option
@writes_products
def report(trends: Path, fractions: Path | None, zones_file: Path | None, zone_field: str | None,
           points_file: Path | None, assessment_dir: Path | None, rmse_limit: float, rgb: str | None, out: Path,
           title: str, pdf: bool, overwrite: bool) -> None:
    """Write a self-contained HTML report of TRENDS.nc: fraction, slope, trajectory, change-date and rule maps,
    area tables (per trajectory, rule, zone, and the from-to table), time series, accuracy, data quality with
    the date ledger, methods in plain words, parameters and the caution. Its tables are written as CSV and its
    figures as PNG beside it.
    """
    from ..errors import InputError
    from ..io.products import open_product
    from ..io.products.consistency import check_same_scene
    from ..io.report import read_assessment, read_points, report_paths, write_report
    from ..report import build_report

    if pdf:
        from ..io.browser import find_chromium, write_report_pdf

        find_chromium()  # no browser: stop before any work
    # claimed before any input is read: a busy, existing or unwritable report stops the run here
    products = claim_products(report_paths(out, _TABLES) + ([out / "report.pdf"] if pdf else []), overwrite)
    trend_ds = open_product(trends)
    if "trajectory" not in trend_ds:
        raise InputError(f"{trends} holds no 'trajectory' variable; give a product of 'unmix trends'")
    fraction_ds = open_product(fractions) if fractions is not None else None
    if fraction_ds is not None:
        check_same_scene(trend_ds, fraction_ds, str(trends), str(fractions))
    names = split_names(rgb, "--rgb")
    if names is not None and len(names) != 3:
        raise InputError(f"--rgb needs three endmember names (red, green, blue), got {len(names)}")
    points = read_points(points_file) if points_file is not None else None
    assessment = read_assessment(assessment_dir) if assessment_dir is not None else None
    zones = _zone_masks(trend_ds, zones_file, zone_field) if fraction_ds is not None else None
    page, tables, figures = build_report(fraction_ds, trend_ds.load(), title=title, zones=zones, points=points,
                                         assessment=assessment, rmse_limit=rmse_limit,
                                         rgb=tuple(names) if names else None)
    written = write_report(page, tables, out, overwrite=overwrite, products=products, figures=figures)
    if pdf:
        write_report_pdf(written[0], out / "report.pdf", products=products)
    products.commit()  # the page, its tables, figures and PDF appear together
    echo_summary(f"report: {written[0]} (+ {len(tables)} CSV tables, {len(figures)} PNG figures"
                 + (", report.pdf" if pdf else "") + ")")


def _zone_masks(trends, zones_file: Path | None, zone_field: str | None):
    """Zone name -> (y, x) mask on the products' grid (pixel centres), or None without zones."""
    import json

    from ..cube.georef import georef_of
    from ..cube.zones import zone_masks
    from ..io.zones import read_zones

    recorded = json.loads(trends.attrs.get("parameters", "{}")).get("zones") or {}
    if zones_file is None:
        if not recorded or not Path(recorded.get("file", "")).is_file():
            return None
        zones_file = Path(recorded["file"])
    field = zone_field or recorded.get("field") or "name"
    wkt, _ = georef_of(trends)
    return zone_masks(read_zones(zones_file, name_field=field, crs=wkt or None), trends["trajectory"].isel(endmember=0))
