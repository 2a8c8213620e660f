"""Zones and cover change for ``unmix trends``: the options, the table variables added to the trend
product, the CSV tables beside it and the summary lines.

With ``--zones`` every area table (trajectories per endmember, rule maps) gains one row per zone plus
``all_zones``, ``outside_zones`` and ``whole_map``; with ``--cover-change`` or ``--periods`` the
product also holds a cover class map per period and a from-to table of hectares (per zone when zones
are given).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import click
import numpy as np
import xarray as xr

from ..cube.cover import default_periods, from_to_frame, from_to_table, parse_periods, period_classes
from ..cube.georef import georef_of, pixel_area_rows
from ..cube.zones import ZoneRaster, zone_area_table, zone_weights
from ..errors import InputError
from ..io.rules import read_class_rules
from ..io.zones import read_zones, write_area_csvs
from ..trajectory import FLAG_MEANINGS, FLAG_VALUES

__all__ = ["zone_options", "ZoneRequest", "zone_csv_paths", "add_zone_tables", "write_zone_csvs", "echo_zones"]

#: Variables and dimensions the zone and cover-change tables add to the trend product.
ZONE_VARIABLES = ("trajectory_zone_area", "trajectory_zone_share", "rule_zone_area", "rule_zone_share",
                  "cover_class", "cover_change_area", "zone", "period", "trajectory_class", "rule_state",
                  "from_class", "to_class")


def zone_options(func):
    """The ``--zones``, ``--zone-field``, ``--zone-pixels``, ``--cover-change`` and ``--periods`` options."""
    options = [
        click.option("--zones", "zones_file", type=click.Path(path_type=Path), default=None, metavar="FILE",
                     help="Zone polygons (GeoJSON, GeoPackage or Shapefile), reprojected to the product's CRS: "
                          "every area table gets one row per zone, all_zones, outside_zones and whole_map."),
        click.option("--zone-field", default="name", show_default=True, metavar="NAME",
                     help="Attribute of the zones file holding each zone's name (features sharing a name are "
                          "one zone)."),
        click.option("--zone-pixels", type=click.Choice([m.value for m in ZoneRaster]), default="centre",
                     show_default=True,
                     help="centre: a pixel is in a zone when its centre is; share: pixels count with the share "
                          "of their area inside the zone (8 x 8 sub-pixels)."),
        click.option("--cover-change", is_flag=True,
                     help="Cover class per pixel in two periods and a from-to table [ha]: the dominant "
                          "endmember, or the 'class' lines of the --rules file."),
        click.option("--periods", default=None, metavar="Y1-Y2,Y3-Y4",
                     help="The two periods of --cover-change (implies it), e.g. 2005-2006,2013-2014; each "
                          "period's fractions are the per-pixel median of its dates. Default: the first and "
                          "the last year of the record."),
    ]
    for option in reversed(options):
        func = option(func)
    return func


@dataclass(frozen=True)
class ZoneRequest:
    """What the zone and cover-change options asked for."""

    zones_file: Path | None
    zone_field: str
    zone_pixels: str
    cover_change: bool
    periods: str | None

    @property
    def active(self) -> bool:
        return self.zones_file is not None or self.changes

    @property
    def changes(self) -> bool:
        return self.cover_change or self.periods is not None

    def command_words(self) -> list[str]:
        words = []
        if self.zones_file is not None:
            words += [f"--zones {self.zones_file}", f"--zone-field {self.zone_field}",
                      f"--zone-pixels {self.zone_pixels}"]
        if self.changes:
            words += ["--cover-change"] + ([f"--periods {self.periods}"] if self.periods else [])
        return words


def zone_csv_paths(out: Path, request: ZoneRequest, with_rules: bool) -> dict[str, Path]:
    """The CSV tables the request writes beside trends.nc (claimed with it before any work)."""
    out = Path(out)
    paths = {}
    if request.zones_file is not None:
        paths["trajectory"] = out / "zone_trajectory_areas.csv"
        if with_rules:
            paths["rules"] = out / "zone_rule_areas.csv"
    if request.changes:
        paths["change"] = out / "cover_change.csv"
    return paths


def add_zone_tables(result: xr.Dataset, fractions: xr.DataArray, request: ZoneRequest, rules,
                    rules_file: Path | None) -> dict:
    """Add the lazy zone tables, class maps and from-to table to ``result``; their parameters for provenance."""
    for rule in rules:
        if rule.name in ZONE_VARIABLES:
            raise InputError(f"{rule.source}, line {rule.line}: rule name {rule.name!r} clashes with a variable "
                             "of the trend product; rename the rule")
    params: dict = {}
    weights = None
    row_area, note = pixel_area_rows(result)
    if request.zones_file is not None:
        wkt, _ = georef_of(result)
        if not wkt:
            raise InputError(f"the fractions product has no CRS, so the zones of {request.zones_file} cannot be "
                             "placed on it; write the fractions from a georeferenced stack")
        zones = read_zones(request.zones_file, name_field=request.zone_field, crs=wkt)
        weights = zone_weights(zones, result["trajectory"], request.zone_pixels)
        params["zones"] = {"file": str(request.zones_file), "sha256": zones.sha256, "field": request.zone_field,
                           "pixels": request.zone_pixels, "zones": list(zones.names), "repaired": zones.repaired}
        _add_trajectory_tables(result, weights, row_area, note)
        if rules:
            _add_rule_tables(result, [r.name for r in rules], weights, row_area, note)
    if request.changes:
        endmembers = [str(e) for e in fractions["endmember"].values]
        class_rules = read_class_rules(rules_file, endmembers) if rules_file is not None else []
        before, after = parse_periods(request.periods) if request.periods else default_periods(fractions["time"].values)
        ca, names = period_classes(fractions, before, class_rules)
        cb, _ = period_classes(fractions, after, class_rules)
        maps = xr.concat([ca, cb], dim="period").assign_coords(period=[before.label, after.label])
        result["cover_class"] = maps.transpose("period", "y", "x").assign_attrs(
            {**ca.attrs, "long_name": "cover class per period"})
        table = from_to_table(ca, cb, names, weights, row_area=row_area)
        result["cover_change_area"] = table["area_ha"].assign_attrs(
            long_name=f"area moving from each cover class in {before.label} to each class in {after.label}",
            units="ha", comment=note)
        params["cover_change"] = {"periods": [before.label, after.label],
                                  "classes": "class rules" if class_rules else "dominant endmember",
                                  "class_rules": {f"{r.name}@{r.line}": r.text for r in class_rules}}
    return params


def _add_trajectory_tables(result, weights, row_area, note) -> None:
    values = np.atleast_1d(FLAG_VALUES).astype(int)
    labels = str(FLAG_MEANINGS).split()
    if not np.array_equal(values, np.arange(len(labels))):  # the tally takes codes 0..n-1
        raise InputError("trajectory flag values are not 0..n-1; the zone tables cannot index them")
    traj = result["trajectory"]
    tables = [zone_area_table(traj.sel(endmember=e), labels, weights, excluded=("insufficient_data",),
                              row_area=row_area, area_note=note) for e in traj["endmember"].values]
    table = xr.concat(tables, dim="endmember").rename({"class": "trajectory_class"})
    result["trajectory_zone_area"] = table["area_ha"]
    result["trajectory_zone_share"] = table["share_pct"].assign_attrs(
        long_name="share of the zone's area with enough valid dates", units="%")


def _add_rule_tables(result, names, weights, row_area, note) -> None:
    tables = [zone_area_table(result[name], ["false", "true"], weights, row_area=row_area, area_note=note)
              for name in names]
    table = xr.concat(tables, dim="rule").assign_coords(rule=names).rename({"class": "rule_state"})
    result["rule_zone_area"] = table["area_ha"]
    result["rule_zone_share"] = table["share_pct"].assign_attrs(
        long_name="share of the zone's area with data for the rule", units="%")


def write_zone_csvs(written: xr.Dataset, paths: dict[str, Path], products) -> list[Path]:
    """Write the CSV tables from the written product's (small) table variables."""
    frames = {}
    if "trajectory" in paths:
        frames[paths["trajectory"]] = _long(written, "trajectory_zone_area", "trajectory_zone_share",
                                            "endmember", "trajectory_class", "trajectory")
    if "rules" in paths:
        frames[paths["rules"]] = _long(written, "rule_zone_area", "rule_zone_share", "rule", "rule_state", "state")
    if "change" in paths:
        before, after = parse_periods(",".join(str(p) for p in written["period"].values))
        table = written[["cover_change_area"]].rename(cover_change_area="area_ha").load()
        frames[paths["change"]] = from_to_frame(table, before, after)
    return write_area_csvs(frames, products)


def _long(ds, area, share, key, cls, cls_name):
    table = xr.Dataset({"area_ha": ds[area], "share_pct": ds[share]}).load()
    frame = table.to_dataframe().reset_index()[[key, "zone", cls, "area_ha", "share_pct"]]
    return frame.rename(columns={cls: cls_name})


def echo_zones(written: xr.Dataset, request: ZoneRequest, csvs: dict[str, Path]) -> None:
    """Summary lines: zones and their areas, the from-to table's converted area."""
    if "trajectory_zone_area" in written:
        area = written["trajectory_zone_area"].isel(endmember=0).sum("trajectory_class").values
        zones = [str(z) for z in written["zone"].values]
        click.echo("  zones (" + request.zone_pixels + "): " + ", ".join(
            f"{z} {a:.2f} ha" for z, a in zip(zones, area)))
    if "cover_change_area" in written:
        m = written["cover_change_area"].sel(zone="whole_map").values[:-1, :-1]
        periods = " -> ".join(str(p) for p in written["period"].values)
        click.echo(f"  cover change {periods}: {m.sum() - np.trace(m):.2f} ha of {m.sum():.2f} ha classified in "
                   "both periods changed class")
    if csvs:
        click.echo("  tables: " + ", ".join(str(p) for p in csvs.values()))
