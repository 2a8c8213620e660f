"""``unmix assess``: error matrix, accuracies and error-adjusted areas from an interpreted sample."""

from __future__ import annotations

from pathlib import Path

import click
import numpy as np
import pandas as pd

from ..accuracy import stratified_area
from ._common import claim_products, echo_summary, out_dir_option, overwrite_option, writes_products

__all__ = ["assess", "ASSESS_TABLES"]

#: Tables written by ``unmix assess`` (``<name>.csv``).
ASSESS_TABLES = ("sample_counts", "error_matrix", "accuracy", "overall")


def _pm(value: float, half: float, fmt: str) -> str:
    if not np.isfinite(value):
        return "n/a"
    return f"{value:{fmt}} ± {half:{fmt}}" if np.isfinite(half) else f"{value:{fmt}} ± n/a"


@click.command("assess")
@click.argument("sample_file", type=click.Path(path_type=Path), metavar="SAMPLE")
@click.option("--strata", "strata_file", type=click.Path(path_type=Path), default=None, metavar="FILE",
              help="strata.csv written by 'unmix sample' (default: strata.csv beside SAMPLE).")
@click.option("--confidence", type=click.FloatRange(0, 1, min_open=True, max_open=True), default=0.95,
              show_default=True, help="Confidence level of the intervals.")
@out_dir_option()
@overwrite_option
@writes_products
def assess(sample_file: Path, strata_file: Path | None, confidence: float, out: Path, overwrite: bool) -> None:
    """Accuracy and error-adjusted areas of a map from its interpreted sample (SAMPLE: csv or geojson).

    Follows Olofsson et al. (2014, Remote Sensing of Environment 148, 42-57): the error matrix in
    estimated area proportions, user's, producer's and overall accuracy, and the area of every class
    estimated from the reference labels, each with its confidence interval. Writes OUT/sample_counts.csv,
    OUT/error_matrix.csv, OUT/accuracy.csv and OUT/overall.csv. Variances carry the finite population
    correction of each class, so a small class sampled in full adds no variance.
    """
    from ..io.sample import read_sample, read_strata, write_tables

    out = Path(out)
    products = claim_products([out / f"{name}.csv" for name in ASSESS_TABLES], overwrite)
    strata = read_strata(strata_file or Path(sample_file).parent / "strata.csv")
    classes = strata["map_class"].astype(str).tolist()
    points = read_sample(sample_file, classes)
    counts = pd.crosstab(pd.Categorical(points["map_class"], categories=classes),
                         pd.Categorical(points["reference"], categories=classes), dropna=False)
    counts = counts.reindex(index=classes, columns=classes, fill_value=0)
    area_m2 = float(strata["pixel_area_m2"].iloc[0])
    in_ha = np.isfinite(area_m2)
    unit = "ha" if in_ha else "pixels"
    mapped = strata["mapped_pixels"].to_numpy(float) * (area_m2 / 1e4 if in_ha else 1.0)
    table = stratified_area(counts.to_numpy(), mapped, classes=classes, confidence=confidence,
                            stratum_units=strata["mapped_pixels"].to_numpy())
    pct = f"{100 * confidence:g}"
    accuracy = table.rename(columns={"mapped_area": f"mapped_area_{unit}", "area": f"area_{unit}",
                                     "area_se": f"area_se_{unit}", "area_ci95": f"area_ci{pct}_{unit}",
                                     "users_ci95": f"users_ci{pct}", "producers_ci95": f"producers_ci{pct}"})
    matrix = pd.DataFrame(table.attrs["error_matrix"], index=pd.Index(classes, name="map \\ reference"),
                          columns=classes)
    overall = pd.DataFrame({"overall_accuracy": [table.attrs["overall_accuracy"]],
                            "overall_se": [table.attrs["overall_se"]],
                            f"overall_ci{pct}": [table.attrs["overall_ci95"]], "n_sample": [len(points)],
                            "confidence": [confidence]})
    counts.index.name, counts.columns.name = "map \\ reference", None
    write_tables({"sample_counts": counts, "error_matrix": matrix, "accuracy": accuracy}, out, products=products,
                 index=True)
    write_tables({"overall": overall}, out, products=products)
    products.commit()
    _summarise(out, table, points, unit, pct)


def _summarise(out: Path, table: pd.DataFrame, points: pd.DataFrame, unit: str, pct: str) -> None:
    a = table.attrs
    echo_summary(f"unmix assess: wrote {out / 'accuracy.csv'} (and error_matrix, sample_counts, overall) - "
                 f"{len(points)} points, overall accuracy {_pm(a['overall_accuracy'], a['overall_ci95'], '.3f')} "
                 f"({pct} % interval)")
    width = max(len("class"), *(len(c) for c in table.index))
    fmt = ",.0f" if table["mapped_area"].max() >= 1000 else ",.1f"
    click.echo("  " + "class".ljust(width) + f"{'n':>6}{'mapped [' + unit + ']':>18}{'estimated [' + unit + ']':>28}"
               f"{'user':>18}{'producer':>18}")
    for name, row in table.iterrows():
        click.echo("  " + name.ljust(width) + f"{int(row['n_sample']):>6d}{row['mapped_area']:>18{fmt}}"
                   f"{_pm(row['area'], row['area_ci95'], fmt):>28}"
                   f"{_pm(row['users_accuracy'], row['users_ci95'], '.3f'):>18}"
                   f"{_pm(row['producers_accuracy'], row['producers_ci95'], '.3f'):>18}")
    if not np.isfinite(table["area"]).all():
        click.echo("  areas n/a: a class with mapped pixels has no interpreted point; its share of the map "
                   "cannot be estimated")
