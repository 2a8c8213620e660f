"""The full demo run: invent the scene, write it as delivered Landsat products, run the commands, score, report.

The invented record switches sensor part way, as real land-degradation records do: a TM-like sensor
first, then an OLI-like one, each date's reflectance mixed from the shipped (invented) spectra resampled
with that sensor's measured band responses. It is written in the Landsat Collection 2 Level-2 layout
(one folder per scene with band files, quality band and metadata), so the demo runs the same commands
an analyst runs on downloaded products (``unmix fractions`` with only the library and the endmembers,
then ``unmix trends``), compares the products with the scenario's known truth and builds the report.
"""

from __future__ import annotations

import shlex
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from ..cube.georef import georef_of
from ..cube.zones import zone_masks
from ..errors import OutputExistsError
from ..io.archive.write import write_landsat_l2
from ..io.ledger import ledger_from_product
from ..io.library import read_library, shipped_library_path
from ..io.products import open_product, write_netcdf
from ..io.report import read_assessment, report_paths, write_points, write_report
from ..io.sample import write_interpreted_sample
from ..io.zones import read_zones, write_zones_file
from ..report import build_report
from ..sensors.roles import DEFAULT_ROLES, bands_for_roles
from ..spectra import resample
from .reference import DISTRICT_FIELD, demo_points, district_polygons, interpret_sample, true_rule
from .scenario import DRY_SEASON_DOY, ENDMEMBERS, ZONES, make_scenario
from .score import date_checks, fraction_errors, sample_areas, trajectory_hits

__all__ = ["DemoResult", "RULES", "SENSORS", "SWITCH_DATE", "inject_faults", "run_demo", "sensor_of_dates"]

#: The record's sensors: a TM-like sensor, then an OLI-like one (invented record, real band responses).
SENSORS = ("landsat-5-tm", "landsat-8-oli")
#: Dates from this day on are observed by the second sensor.
SWITCH_DATE = np.datetime64("2012-07-01")
#: Faults built into the invented record, for the date checks to find (see :func:`inject_faults`): a date
#: acquired out of season (the wet season), a date shifted by about 1.5 pixels, and a date whose near
#: infrared reads 10 % high (as after a calibration change).
OFF_SEASON_DATE = np.datetime64("2010-01-20")
SHIFTED = {"at": 0.45, "shift": (1.2, -0.9)}
BRIGHT = {"at": 0.65, "band": "nir", "gain": 1.1}
#: Rule map the demo samples for accuracy and sample-based area, and the sample size.
SAMPLED_RULE = "desertification"
SAMPLE_SIZE = 300
#: Day-of-year window the demo keeps: the record's dry season (scenario.DRY_SEASON_DOY) and the dates'
#: jitter of up to 10 days either side.
DOY_WINDOW = f"{DRY_SEASON_DOY[0] - 10}-{DRY_SEASON_DOY[1] + 10}"
RULES = """\
# Modification rules of the invented Marrow Creek demo (see 'unmix trends --help' for the syntax).
desertification = green_vegetation:gradual_decrease & sand:gradual_increase
clearing = green_vegetation:abrupt_decrease & sand:abrupt_increase
recovery = green_vegetation:gradual_increase & sand:decrease
"""


@dataclass(frozen=True)
class DemoResult:
    """What the demo produced and how well it recovered the truth."""

    out: Path
    commands: list[str]
    errors: pd.DataFrame
    hits: pd.DataFrame
    checks: pd.DataFrame
    rule_areas: pd.DataFrame
    areas: pd.DataFrame
    pivot_disc_ha: float
    report: Path


def sensor_of_dates(dates: np.ndarray) -> list[str]:
    """The sensor that observed each date of the invented record."""
    return [SENSORS[int(np.datetime64(d, "D") >= SWITCH_DATE)] for d in dates]


def _run(args: list[str], echo=print) -> None:
    """Run one command; its warnings (the date checks flag the record's built-in faults) are shown as lines."""
    import warnings

    from ..cli.main import cli
    from ..errors import UnmixWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", UnmixWarning)
        cli.main(args=args, prog_name="unmix", standalone_mode=False)
    for w in caught:
        if issubclass(w.category, UnmixWarning):
            echo(f"warning: {w.message}")
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)


def run_demo(out: str | Path, *, size: int = 160, n_time: int = 40, seed: int = 7, overwrite: bool = False,
             echo=print) -> DemoResult:
    """Run the whole demo into folder ``out`` and return its scores.

    Parameters
    ----------
    out : path
        Folder for the stack, the products and the report (created if missing).
    size : int
        Pixels per side of the invented scene (30 m pixels).
    n_time : int
        Number of dates over ten years.
    seed : int
        Seed of the scene's random parts.
    overwrite : bool
        Replace the products of an earlier demo run in ``out``.
    echo : callable
        Where progress lines go.
    """
    out = Path(out)
    stack_dir = out / "stack"
    targets = [out / "truth.nc", out / "fractions.nc", out / "trends.nc", out / "rules.txt", out / "dates.csv",
               out / "districts.geojson", out / "points.csv", out / "sample", out / "assessment",
               *report_paths(out / "report", ["trajectory_areas", "rule_areas", "dates"])]
    existing = [str(p) for p in targets if p.exists()]
    if (stack_dir.exists() and any(stack_dir.iterdir())) and not overwrite:
        existing.append(str(stack_dir))
    if existing and not overwrite:
        raise OutputExistsError(f"{existing[0]} exists already (an earlier demo run?); "
                                "pass --overwrite to replace the demo products")

    library_path = shipped_library_path("demo_library")
    library = read_library(library_path).select(list(ENDMEMBERS))
    spectra = {s: resample(library, s, bands_for_roles(s, DEFAULT_ROLES)).spectra for s in SENSORS}
    extra = [OFF_SEASON_DATE]
    probe = make_scenario(spectra[SENSORS[0]], size=8, n_time=n_time, seed=seed, extra_dates=extra)  # the dates only
    sensors = sensor_of_dates(probe.dates)
    scenario = make_scenario(np.stack([spectra[s] for s in sensors]), size=size, n_time=n_time, seed=seed,
                             extra_dates=extra)
    observed, faults = inject_faults(scenario.reflectance, scenario.dates, list(DEFAULT_ROLES))
    counts = {s: sensors.count(s) for s in SENSORS}
    echo(f"Invented scene 'Marrow Creek': {size} x {size} pixels of 30 m, {len(scenario.dates)} dates "
         f"{scenario.dates[0]} .. {scenario.dates[-1]}; " + ", then ".join(f"{n} dates of {s}" for s, n in counts.items())
         + ", written as Landsat Collection 2 Level-2 scene folders")

    if overwrite and stack_dir.exists():
        import shutil

        for old in stack_dir.glob("L[CT]0[58]_L2SP_*"):
            shutil.rmtree(old)
    write_landsat_l2(observed, scenario.dates, sensors, stack_dir, crs=f"EPSG:{scenario.crs_epsg}",
                     transform=scenario.transform, overwrite=overwrite)
    _write_truth(scenario, out / "truth.nc", overwrite)
    rules_path = out / "rules.txt"
    if rules_path.exists() and not overwrite:
        raise OutputExistsError(f"{rules_path} exists already; pass --overwrite")
    rules_path.write_text(RULES, encoding="utf-8")

    flag = ["--overwrite"] if overwrite else []
    districts_path, points_path = out / "districts.geojson", out / "points.csv"
    names, polygons = district_polygons(scenario, "EPSG:4326")
    write_zones_file(districts_path, names, polygons, crs="EPSG:4326", name_field=DISTRICT_FIELD, overwrite=overwrite)
    points = demo_points(scenario)
    write_points(points, points_path, overwrite=overwrite)
    sample_dir, assessment_dir = out / "sample", out / "assessment"
    commands = [
        ["fractions", str(stack_dir), "--library", str(library_path), "--endmembers", ",".join(ENDMEMBERS),
         "--doy-window", DOY_WINDOW, "--radiometry-exclude", "--out", str(out), *flag],
        ["trends", str(out / "fractions.nc"), "--rules", str(rules_path), "--zones", str(districts_path),
         "--zone-field", DISTRICT_FIELD, "--cover-change", "--cog", "--out", str(out), *flag],
        ["sample", str(out / "trends.nc"), "--map", SAMPLED_RULE, "--total", str(SAMPLE_SIZE), "--seed", "1",
         "--out", str(sample_dir), *flag],
    ]
    for args in commands:
        echo("$ unmix " + shlex.join(args))
        _run(args, echo)

    # the sample interpreted: here from the invented truth (in practice, on fine-resolution imagery)
    interpreted = sample_dir / "interpreted.csv"
    write_interpreted_sample(sample_dir / "sample.csv",
                             lambda t: interpret_sample(t["row"], t["col"], scenario, SAMPLED_RULE), interpreted,
                             overwrite=overwrite)
    echo(f"(the sample points interpreted from the invented truth -> {interpreted})")
    assess = ["assess", str(interpreted), "--out", str(assessment_dir), *flag]
    echo("$ unmix " + shlex.join(assess))
    _run(assess, echo)
    commands.append(assess)

    fractions = open_product(out / "fractions.nc").load()
    trends = open_product(out / "trends.nc").load()
    errors = fraction_errors(scenario, fractions)
    hits = trajectory_hits(scenario, trends)
    checks = date_checks(faults, ledger_from_product(fractions))
    assessment = read_assessment(assessment_dir)
    areas = sample_areas(assessment["accuracy"], true_rule(scenario, SAMPLED_RULE), SAMPLED_RULE)
    zones = zone_masks(read_zones(districts_path, name_field=DISTRICT_FIELD, crs=georef_of(trends)[0]),
                       trends["trajectory"].isel(endmember=0))
    page, tables, figures = build_report(
        fractions, trends, title="Marrow Creek (invented demo scene): fractions and trends",
        zones=zones, points=points, assessment=assessment,
        extra_sections=[
            ("Faults built into the record", "<p>Three dates of the invented record carry faults on purpose; "
             "the date checks of <code>unmix fractions</code> should find each.</p>"
             + checks.to_html(index=False, border=0)),
            ("Recovered against the invented truth",
             "<p>This scene is invented; its true fractions and zones are known, so the tool's "
             "estimates can be scored. The reference sample was interpreted from this truth.</p>"
             + errors.to_html(index=False, float_format="%.4f", border=0)
             + hits.to_html(index=False, float_format="%.1f", border=0)
             + areas.to_html(index=False, float_format=lambda v: f"{v:,.1f}", border=0)
             + f"<p>True area of the cleared centre-pivot disc: {scenario.pivot_disc_ha:.2f} ha.</p>"),
        ],
    )
    written = write_report(page, tables, out / "report", overwrite=overwrite, figures=figures)
    fractions.close()
    trends.close()
    return DemoResult(out=out, commands=["unmix " + shlex.join(a) for a in commands], errors=errors,
                      hits=hits, checks=checks, rule_areas=tables["rule_areas"], areas=areas,
                      pivot_disc_ha=scenario.pivot_disc_ha, report=written[0])


def _date_at(dates: np.ndarray, share: float) -> int:
    """The in-season date (not the off-season one) at ``share`` of the way through the record."""
    candidates = np.flatnonzero(dates.astype("datetime64[D]") != OFF_SEASON_DATE)
    return int(candidates[min(int(round(share * (candidates.size - 1))), candidates.size - 1)])


def inject_faults(reflectance: np.ndarray, dates: np.ndarray, bands: list[str]) -> tuple[np.ndarray, list[dict]]:
    """The observed record: the scenario's reflectance with the faults the date checks must find.

    One date is shifted by :data:`SHIFTED` pixels (cubic spline resampling; clouds move with the ground),
    one date's band reads :data:`BRIGHT` times too high. The off-season date is already in the record
    (:data:`OFF_SEASON_DATE`). Returns the observed reflectance and one record per fault.
    """
    from scipy import ndimage

    observed = reflectance.copy()
    i = _date_at(dates, SHIFTED["at"])
    dy, dx = SHIFTED["shift"]
    for b in range(observed.shape[1]):
        img = observed[i, b]
        valid = np.isfinite(img)
        filled = np.where(valid, img, np.nanmean(img))
        moved = ndimage.shift(filled, (dy, dx), order=3, mode="nearest")
        moved_valid = ndimage.shift(valid.astype(np.float32), (dy, dx), order=1, mode="nearest") > 0.5
        observed[i, b] = np.where(moved_valid, moved, np.nan)
    j = _date_at(dates, BRIGHT["at"])
    observed[j, bands.index(BRIGHT["band"])] *= BRIGHT["gain"]
    faults = [] if OFF_SEASON_DATE not in dates.astype("datetime64[D]") else [
        {"date": str(OFF_SEASON_DATE), "built in": "acquired in the wet season (day of year "
                                                 f"{int((OFF_SEASON_DATE - OFF_SEASON_DATE.astype('datetime64[Y]')).astype(int)) + 1})"}]
    faults += [
        {"date": str(dates[i]), "built in": f"shifted by {np.hypot(dy, dx):.2f} px (y {dy:+g}, x {dx:+g})"},
        {"date": str(dates[j]), "built in": f"{BRIGHT['band']} band x {BRIGHT['gain']:g} (calibration-like gain)"},
    ]
    return observed, faults


def _write_truth(scenario, path: Path, overwrite: bool) -> None:
    ny, nx = scenario.zone.shape
    a, _, c, _, e, f = scenario.transform
    x = c + a * (np.arange(nx) + 0.5)
    y = f + e * (np.arange(ny) + 0.5)
    from rasterio.crs import CRS

    from ..io.products import grid_mapping_attrs

    ds = xr.Dataset(
        {
            "fractions": (("time", "endmember", "y", "x"), scenario.fractions.astype(np.float32),
                          {"long_name": "true cover fraction of the invented scene", "units": "1"}),
            "zone": (("y", "x"), scenario.zone,
                     {"long_name": "zone of the invented story", "flag_values": np.arange(len(ZONES), dtype=np.int8),
                      "flag_meanings": " ".join(ZONES)}),
        },
        coords={"time": scenario.dates.astype("datetime64[ns]"), "endmember": list(ENDMEMBERS), "y": y, "x": x},
    )
    crs = CRS.from_epsg(scenario.crs_epsg)
    ds = ds.assign_coords(spatial_ref=xr.DataArray(0, attrs=grid_mapping_attrs(crs, scenario.transform)))
    write_netcdf(ds, path, overwrite=overwrite, command="unmix demo", title="invented truth of the demo scene",
                 parameters={"scenario": "Marrow Creek (invented)", "invented": True})


def summary_text(result: DemoResult) -> str:
    """A short plain-text account of the demo's scores."""
    lines = ["", "Faults built into the record, and what the date checks found (ledger: dates.csv):",
             result.checks.to_string(index=False), "",
             "Recovered fractions against the invented truth (the dates used, all valid pixels):",
             result.errors.to_string(index=False, float_format=lambda v: f"{v:.4f}"), "",
             "Expected trajectory recovered, per zone (% of the zone's pixels; the dates left out do not "
             "disturb it):",
             result.hits.to_string(index=False, float_format=lambda v: f"{v:.1f}"), ""]
    if len(result.rule_areas):
        lines += ["Modification rules (area flagged):",
                  result.rule_areas.to_string(index=False, float_format=lambda v: f"{v:,.2f}"),
                  f"(true area of the cleared pivot disc: {result.pivot_disc_ha:.2f} ha)", ""]
    lines += [f"Area of '{SAMPLED_RULE}': pixel count against the sample-based estimate (Olofsson et al. 2014) and "
              "the invented truth [ha]:",
              result.areas.to_string(index=False, float_format=lambda v: f"{v:,.1f}"), ""]
    lines += [f"Report: {result.report}"]
    return "\n".join(lines)
