"""``unmix sample``: a stratified random sample of a class map of a trends product, to interpret."""

from __future__ import annotations

from pathlib import Path

import click
import numpy as np

from .. import __version__
from ..accuracy import DEFAULT_MIN_PER_CLASS, allocate, sample_size
from ..errors import InputError
from ._common import claim_products, echo_summary, out_dir_option, overwrite_option, writes_products

__all__ = ["sample", "expected_accuracies"]

#: Expected user's accuracy of a class the option does not name (our own default).
DEFAULT_EXPECTED_ACCURACY = 0.8


def expected_accuracies(text: str, classes: list[str]) -> np.ndarray:
    """Per-class expected user's accuracy from ``0.9`` or ``0.9,abrupt_decrease=0.7`` (bare value = default)."""
    default = DEFAULT_EXPECTED_ACCURACY
    named: dict[str, float] = {}
    for part in (p.strip() for p in text.split(",") if p.strip()):
        name, _, value = part.rpartition("=")
        try:
            number = float(value)
        except ValueError:
            raise InputError(f"--expected-accuracy: {part!r} is not a number or CLASS=NUMBER") from None
        if not 0 <= number <= 1:
            raise InputError(f"--expected-accuracy: {part!r} must lie in 0..1")
        if not name:
            default = number
        elif name.strip() not in classes:
            raise InputError(f"--expected-accuracy names {name.strip()!r}, not a class of the map; classes: "
                             f"{', '.join(classes)}")
        else:
            named[name.strip()] = number
    return np.array([named.get(c, default) for c in classes])


@click.command("sample")
@click.argument("trends", type=click.Path(path_type=Path), metavar="TRENDS.nc")
@click.option("--map", "map_name", default="trajectory", show_default=True,
              help="Class map to sample: 'trajectory' (with --endmember) or the name of a rule map.")
@click.option("--endmember", default=None, help="Endmember whose trajectory map is sampled.")
@click.option("--total", type=click.IntRange(min=1), default=None,
              help="Total sample size, shared among classes in proportion to area with at least --min-per-class "
                   "each. Default: the size that reaches --target-se (Olofsson et al. 2014, eq. 13).")
@click.option("--per-class", type=click.IntRange(min=1), default=None,
              help="The same sample size in every class, instead of --total.")
@click.option("--min-per-class", type=click.IntRange(min=0), default=DEFAULT_MIN_PER_CLASS, show_default=True,
              help="Smallest sample of a class (a class with fewer pixels gives all of them).")
@click.option("--target-se", type=click.FloatRange(0, 1, min_open=True, max_open=True), default=0.01,
              show_default=True, help="Standard error of the overall accuracy the default sample size aims at.")
@click.option("--expected-accuracy", default=str(DEFAULT_EXPECTED_ACCURACY), show_default=True,
              help="Expected user's accuracy for the default sample size: one value for every class, or "
                   "CLASS=VALUE pairs separated by commas (e.g. '0.9,abrupt_decrease=0.6').")
@click.option("--seed", type=click.IntRange(min=0), default=0, show_default=True,
              help="Seed of the random draw: the same seed gives the same points.")
@out_dir_option()
@overwrite_option
@writes_products
def sample(trends: Path, map_name: str, endmember: str | None, total: int | None, per_class: int | None,
           min_per_class: int, target_se: float, expected_accuracy: str, seed: int, out: Path,
           overwrite: bool) -> None:
    """Draw a stratified random sample of pixels of a class map and write it for interpretation.

    Writes OUT/sample.csv and OUT/sample.geojson (points at pixel centres in the map's CRS, lon/lat in
    WGS 84, an empty 'reference' column) and OUT/strata.csv (mapped pixels and area of every class,
    needed by 'unmix assess'). Pixels with insufficient_data are not sampled: areas are estimated over
    the pixels with data. Fill in 'reference' with the class seen on reference imagery, then run
    'unmix assess OUT/sample.csv'.
    """
    from ..cube.accuracy import sample_points, select_class_map, strata_table
    from ..cube.georef import georef_of
    from ..io.products import open_product
    from ..io.sample import SAMPLE_FILES, write_sample

    if total is not None and per_class is not None:
        raise InputError("give either --total or --per-class, not both")
    products = claim_products([Path(out) / name for name in SAMPLE_FILES], overwrite)
    ds = open_product(trends)
    da = select_class_map(ds, map_name, endmember).load()  # one read: counted, then drawn from
    strata = strata_table(da)
    classes = strata["map_class"].tolist()
    pixels = strata["mapped_pixels"].to_numpy()
    if pixels.sum() == 0:
        raise InputError(f"map {map_name!r} of {trends} has no pixel with data to sample")
    how = ""
    if per_class is not None:
        sizes = np.minimum(per_class, pixels)
        how = f"{per_class} per class"
    else:
        if total is None:
            accuracies = expected_accuracies(expected_accuracy, classes)
            total = sample_size(pixels, accuracies, target_se, population=int(pixels.sum()))
            how = f"n = {total} for a standard error of {target_se} of the overall accuracy, "
        sizes = allocate(total, pixels, minimum=min_per_class)
        how += f"shared by area, at least {min_per_class} per class"
    strata["n_sample"] = sizes
    points = sample_points(da, strata, sizes, seed)
    wkt, _ = georef_of(da)
    about = {"unmix_version": __version__, "product": str(trends), "map": map_name, "endmember": endmember,
             "seed": seed, "sample_size": how}
    write_sample(points, strata, out, crs_wkt=wkt, products=products, about=about)
    ds.close()
    products.commit()
    label = f"{map_name} of {endmember}" if endmember else map_name
    echo_summary(f"unmix sample: wrote {Path(out) / 'sample.csv'} (and .geojson, strata.csv) - {len(points)} points "
                 f"of map {label} ({how}), seed {seed}")
    width = max(len("class"), *(len(c) for c in classes))
    unit = "area [ha]" if np.isfinite(strata["pixel_area_m2"].iloc[0]) else "area [pixels]"
    click.echo("  " + "class".ljust(width) + f"{'pixels':>14}{unit:>16}{'points':>9}")
    for row in strata.itertuples():
        area = row.mapped_area_ha if np.isfinite(row.pixel_area_m2) else row.mapped_pixels
        click.echo("  " + row.map_class.ljust(width) + f"{row.mapped_pixels:>14,d}{area:>16,.1f}{row.n_sample:>9d}")
