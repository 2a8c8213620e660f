"""``unmix validate``: agreement of a fractions product with reference fractions at points."""

from __future__ import annotations

from pathlib import Path

import click
import numpy as np
import pandas as pd

from ..accuracy import fraction_agreement
from ..errors import InputError
from ._common import claim_products, echo_summary, out_dir_option, overwrite_option, writes_products

__all__ = ["validate", "VALIDATE_FILES"]

#: Files written by ``unmix validate``.
VALIDATE_FILES = ("fraction_agreement.csv", "fraction_points.csv", "fraction_agreement.png")


@click.command("validate")
@click.argument("fractions", type=click.Path(path_type=Path), metavar="FRACTIONS.nc")
@click.argument("points", type=click.Path(path_type=Path), metavar="POINTS.csv")
@click.option("--date", "date", default=None, metavar="YYYY-MM-DD",
              help="Date of every reference point when POINTS.csv has no 'date' column.")
@click.option("--max-days", type=click.FloatRange(min=0), default=16.0, show_default=True,
              help="Largest gap between a reference date and the nearest date of the product [days].")
@out_dir_option()
@overwrite_option
@writes_products
def validate(fractions: Path, points: Path, date: str | None, max_days: float, out: Path, overwrite: bool) -> None:
    """Compare estimated fractions with reference fractions at points (plots, interpreted fine images).

    POINTS.csv: x and y in the product's CRS (or lon and lat in WGS 84 degrees), an optional date
    (YYYY-MM-DD), and one column per endmember, named as in the product, with the reference fraction
    0..1. Each point takes the pixel that holds it at the product date nearest to its date. Writes
    OUT/fraction_agreement.csv (n, MAE, RMSE, bias, R^2, the least-squares line per endmember),
    OUT/fraction_points.csv (the pairs) and OUT/fraction_agreement.png (scatter plots).
    """
    from ..cube.accuracy import fractions_at_points
    from ..cube.georef import georef_of
    from ..io.products import open_product
    from ..io.sample import read_reference_points, write_figure, write_tables
    from ..report.accuracy import fraction_scatter_figure

    out = Path(out)
    products = claim_products([out / name for name in VALIDATE_FILES], overwrite)
    ds = open_product(fractions)
    if "fractions" not in ds.data_vars or "endmember" not in ds.dims:
        raise InputError(f"{fractions} is not a fractions product (no 'fractions' variable on time, endmember, y, "
                         "x); give the fractions.nc written by 'unmix fractions'")
    endmembers = [str(v) for v in ds["endmember"].values]
    wkt, _ = georef_of(ds["fractions"])
    table = read_reference_points(points, endmembers, wkt)
    if "date" in table.columns:
        dates = table["date"].to_numpy("datetime64[s]")
    elif date is not None:
        try:
            dates = np.full(len(table), np.datetime64(date, "s"))
        except ValueError:
            raise InputError(f"--date {date!r} is not a date; use YYYY-MM-DD") from None
    else:
        dates = None
    given = [e for e in endmembers if e in table.columns]
    est_all = fractions_at_points(ds["fractions"], table["x"], table["y"], dates, max_days=max_days)
    est = est_all[:, [endmembers.index(e) for e in given]]
    ref = table[given].to_numpy(float)
    agreement = fraction_agreement(est, ref, endmembers=given)
    pairs = pd.DataFrame({"x": table["x"], "y": table["y"]})
    for j, name in enumerate(given):
        pairs[f"{name}_reference"] = ref[:, j]
        pairs[f"{name}_estimated"] = est[:, j]
    write_tables({"fraction_agreement": agreement.reset_index()}, out, products=products)
    write_tables({"fraction_points": pairs}, out, products=products)
    write_figure(fraction_scatter_figure(est, ref, agreement), out / "fraction_agreement.png", products=products)
    ds.close()
    products.commit()
    echo_summary(f"unmix validate: wrote {out / 'fraction_agreement.csv'} (and fraction_points.csv, "
                 f"fraction_agreement.png) - {len(table)} reference points")
    width = max(len("endmember"), *(len(e) for e in given))
    click.echo("  " + "endmember".ljust(width) + "".join(f"{c:>9}" for c in ("n", "MAE", "RMSE", "bias", "R²")))
    for name, row in agreement.iterrows():
        click.echo("  " + name.ljust(width) + f"{int(row['n']):>9d}{row['mae']:>9.3f}{row['rmse']:>9.3f}"
                   f"{row['bias']:>+9.3f}{row['r2']:>9.2f}")
