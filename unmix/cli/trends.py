"""``unmix trends``: per-pixel trajectories of a fractions product, and modification rules."""

from __future__ import annotations

import contextlib
import time as _time
from pathlib import Path

import click
import numpy as np

from ..cube.trends import SeasonScheme, trend_cube
from ..errors import InputError
from ..io.products import open_product, provenance_attrs, write_netcdf
from ..io.products.trend_cogs import trend_cog_paths, write_trend_cogs
from ..io.rules import read_rules
from ..trajectory import Trajectory
from ..trend import DEFAULT_CORRECTION, MannKendallCorrection
from ._common import claim_products, echo_summary, out_dir_option, overwrite_option, writes_products
from ._scheduler import dask_scheduler, scheduler_options
from ._zones import ZoneRequest, add_zone_tables, echo_zones, write_zone_csvs, zone_csv_paths, zone_options

__all__ = ["trends"]


@click.command("trends")
@click.argument("fractions", type=click.Path(path_type=Path), metavar="FRACTIONS.nc")
@out_dir_option()
@click.option("--fdr-q", "fdr_q", type=click.FloatRange(0, 1, min_open=True, max_open=True), default=0.05,
              show_default=True,
              help="False discovery rate (Benjamini-Hochberg), controlled over all pixels of each endmember map.")
@click.option("--min-slope", type=click.FloatRange(min=0), default=0.005, show_default=True,
              help="Smallest |Sen slope| called a gradual change [fraction per year].")
@click.option("--min-step", type=click.FloatRange(min=0), default=0.05, show_default=True,
              help="Smallest |step| (mean after minus mean before) called an abrupt change [fraction].")
@click.option("--correction", type=click.Choice([c.value for c in MannKendallCorrection]),
              default=DEFAULT_CORRECTION.value, show_default=True,
              help="Serial-correlation correction of the Mann-Kendall test (not used with seasons).")
@click.option("--season-scheme", type=click.Choice([s.value for s in SeasonScheme]), default="none",
              show_default=True,
              help="Seasonal Kendall test and seasonal Sen slope by calendar month or by meteorological season "
                   "(DJF, MAM, JJA, SON).")
@click.option("--min-valid", type=click.IntRange(min=3), default=8, show_default=True,
              help="Fewest valid dates a pixel needs for a label; fewer gives insufficient_data.")
@click.option("--rules", "rules_file", type=click.Path(path_type=Path), default=None, metavar="FILE",
              help="Modification rules, one per line, e.g. "
                   "'desertification = green_vegetation:gradual_decrease & sand:gradual_increase'.")
@zone_options
@click.option("--cog", is_flag=True, default=False,
              help="Also write Cloud-Optimized GeoTIFFs for a GIS: OUT/trajectory.tif (uint8 codes), slope.tif "
                   "[1/yr], q_value.tif, change_date.tif (decimal year, e.g. 2019.5) with one band per endmember, "
                   "and rule_<name>.tif per rule (0 false, 1 true, 255 insufficient data); category names and "
                   "colours of the categorical maps in <file>.aux.xml beside them.")
@overwrite_option
@scheduler_options
@writes_products
def trends(fractions: Path, out: Path, fdr_q: float, min_slope: float, min_step: float, correction: str,
           season_scheme: str, min_valid: int, rules_file: Path | None, zones_file: Path | None, zone_field: str,
           zone_pixels: str, cover_change: bool, periods: str | None, cog: bool, overwrite: bool,
           workers: int | None, scheduler: str | None) -> None:
    """Label each pixel's fraction series per endmember and write OUT/trends.nc.

    Labels: stable, gradual_increase, gradual_decrease (significant Mann-Kendall trend after FDR
    control and |Sen slope| >= --min-slope), abrupt_increase, abrupt_decrease (significant Pettitt
    change point after FDR control, a single step fits better than a line by BIC, and
    |step| >= --min-step; the change date is the first date after the break), insufficient_data
    (fewer than --min-valid dates). The product also holds Sen slopes [1/yr] with 95 % intervals,
    p- and q-values, and one map per rule with its area [ha]. --zones adds per-zone area tables;
    --cover-change / --periods a cover class map per period and a from-to table [ha] (also as CSV).
    With --cog the maps also come as GeoTIFFs, written and put in place together with trends.nc
    (all or none).
    """
    started = _time.perf_counter()
    target = Path(out) / "trends.nc"
    # claimed before the input is read: a busy, existing or unwritable product stops the run here
    request = ZoneRequest(zones_file, zone_field, zone_pixels, cover_change, periods)
    csvs = zone_csv_paths(out, request, with_rules=rules_file is not None)
    products = claim_products([target, *csvs.values()], overwrite)
    # whole time series per chunk straight from the file (no rechunk of single-date chunks), file's y/x chunks
    ds = open_product(fractions, chunks={"time": -1})
    if "fractions" not in ds.data_vars or "endmember" not in ds.dims:
        raise InputError(
            f"{fractions} is not a fractions product (no 'fractions' variable on time, endmember, y, x); "
            "give the fractions.nc written by 'unmix fractions'"
        )
    endmembers = [str(v) for v in ds["endmember"].values]
    rules = read_rules(rules_file, endmembers) if rules_file is not None else []
    cog_paths = trend_cog_paths(out, [r.name for r in rules]) if cog else []
    products.claim_more(cog_paths)
    result = trend_cube(
        ds,
        q=fdr_q,
        min_slope=min_slope,
        min_valid=min_valid,
        min_step=min_step,
        correction=MannKendallCorrection(correction),
        season_scheme=SeasonScheme(season_scheme),
        rules=rules,
    )
    # the date ledger of the fractions (every date, used or not, and why) travels with the trends
    from ..io.ledger import ledger_variable_names

    result = result.assign({k: ds[k].load() for k in ledger_variable_names(ds)})
    zone_parameters = add_zone_tables(result, ds["fractions"], request, rules, rules_file) if request.active else {}
    parameters = {
        "fdr_q": fdr_q,
        "min_slope": min_slope,
        "min_step": min_step,
        "min_valid": min_valid,
        "correction": correction,
        "season_scheme": season_scheme,
        "rules": {r.name: r.text for r in rules},
        **zone_parameters,
    }
    command = " ".join(
        ["unmix trends", str(fractions), f"--out {out}", f"--fdr-q {fdr_q}", f"--min-slope {min_slope}",
         f"--min-step {min_step}", f"--correction {correction}", f"--season-scheme {season_scheme}",
         f"--min-valid {min_valid}"]
        + ([f"--rules {rules_file}"] if rules_file is not None else [])
        + request.command_words()
        + (["--cog"] if cog else [])
        + (["--overwrite"] if overwrite else [])
    )
    inputs = ([str(fractions)] + ([str(rules_file)] if rules_file is not None else [])
              + ([str(zones_file)] if zones_file is not None else []))
    with dask_scheduler(workers=workers, scheduler=scheduler) as run:
        # xarray takes a distributed lock for the NetCDF write, which needs the client to be current
        current = run.client.as_current() if run.client is not None else contextlib.nullcontext()
        with current:
            write_netcdf(
                result,
                target,
                overwrite=overwrite,
                command=command,
                parameters=parameters,
                input_files=inputs,
                title="unmix trends",
                compute=run.compute,
                products=products,
            )
        where = run.describe()
    if csvs:
        with open_product(products.staged(target)) as written:
            write_zone_csvs(written, csvs, products)
    ds.close()
    if cog_paths:
        from ..report.palettes import RULE_COLOURS, TRAJECTORY_PALETTE

        product = open_product(products.staged(target))
        tags = provenance_attrs(command=command, parameters=parameters, input_files=inputs,
                                endmember_names=endmembers, title="unmix trends")
        write_trend_cogs(product, out, rule_names=[r.name for r in rules], tags=tags, products=products,
                         overwrite=overwrite, colours={"trajectory": TRAJECTORY_PALETTE, "rule": RULE_COLOURS})
        product.close()
    products.commit()  # trends.nc and its GeoTIFFs appear together, or none of them
    _summarise(target, ds, rules, started, where, fdr_q, correction, season_scheme, len(cog_paths))
    if request.active:
        with open_product(target) as written:
            echo_zones(written, request, csvs)


def _summarise(target: Path, ds, rules, started: float, where: str, fdr_q, correction, season_scheme,
               n_cog: int = 0) -> None:
    written = open_product(target)
    codes = written["trajectory"].values  # (endmember, y, x) int8: small next to the cube
    endmembers = [str(v) for v in written["endmember"].values]
    ny, nx = written.sizes["y"], written.sizes["x"]
    test = f"seasonal Kendall ({season_scheme})" if season_scheme != "none" else f"Mann-Kendall ({correction})"
    echo_summary(
        f"unmix trends: wrote {target}{f' (+{n_cog} GeoTIFF and .aux.xml files)' if n_cog else ''} - "
        f"{len(endmembers)} endmembers x {ny} x {nx} pixels x "
        f"{ds.sizes['time']} dates, {test}, FDR q = {fdr_q}, in {_time.perf_counter() - started:.1f} s on {where}"
    )
    labels = [m.label for m in Trajectory]
    width = max(len("endmember"), *(len(e) for e in endmembers))
    click.echo("  " + "endmember".ljust(width) + "".join(f"{lab:>19}" for lab in labels))
    for i, name in enumerate(endmembers):
        counts = np.bincount(codes[i].ravel().astype(np.int64), minlength=len(labels))[: len(labels)]
        click.echo("  " + name.ljust(width) + "".join(f"{c:>19d}" for c in counts))
    if rules:
        area = written["rule_area"].values
        share = written["rule_share"].values
        pixels = written["rule_pixels"].values
        rw = max(len("rule"), *(len(r.name) for r in rules))
        click.echo("  " + "rule".ljust(rw) + f"{'pixels':>12}{'area [ha]':>14}{'share':>9}")
        for i, r in enumerate(rules):
            share_txt = "n/a" if not np.isfinite(share[i]) else f"{100 * share[i]:.1f} %"
            area_txt = "n/a" if not np.isfinite(area[i]) else f"{area[i]:.2f}"
            click.echo("  " + r.name.ljust(rw) + f"{int(pixels[i]):>12d}{area_txt:>14}{share_txt:>9}")
    written.close()
