"""The keys of a plan file: section, name, kind, default, limits and the comment the template shows.

One table describes the file; the reader (:mod:`unmix.io.plan.read`) checks a plan against it and the
template (:mod:`unmix.io.plan.toml`) is written from it, so the two cannot drift apart. Choices come from
the method enums the commands use (their values are the allowed words).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import Any

__all__ = ["Key", "Section", "ENDMEMBER_SOURCES", "schema", "all_dotted_keys"]

#: The three ways a plan names its endmembers: exactly one of these sub-tables of [endmembers].
ENDMEMBER_SOURCES = ("library", "extraction", "bundles")


@dataclass(frozen=True)
class Key:
    """One key of a plan section.

    ``kind`` is one of: ``str``, ``int``, ``float``, ``bool``, ``date``, ``choice``, ``path`` (a file or
    folder that must exist), ``out`` (a folder that need not exist), ``paths`` (one or more existing
    paths or globs), ``names`` (list of strings), ``ints`` (list of whole numbers), ``pair`` (two whole
    numbers), ``floats4`` (four numbers), ``range`` (two numbers or false), ``count`` ("auto" or a whole
    number), ``qa`` (a band number / name, or an existing path), ``pattern`` (a string matching ``pattern``).
    """

    name: str
    kind: str
    help: str
    default: Any = None
    required: bool = False
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    choices: tuple[str, ...] = ()
    pattern: str | None = None
    example: Any = None  # shown (commented out) in the template for keys without a default

    def expected(self) -> str:
        """What the key takes, in words (for error messages and the template)."""
        words = {
            "str": "a string", "int": "a whole number", "float": "a number", "bool": "true or false",
            "date": "a date (2019-03-01)", "choice": "one of " + ", ".join(repr(c) for c in self.choices),
            "path": "a path to an existing file or folder", "out": "a folder path",
            "paths": "a path, a glob or a list of them", "names": "a list of strings",
            "ints": "a list of whole numbers", "pair": "two whole numbers [start, end]",
            "floats4": "four numbers [left, bottom, right, top]", "range": "two numbers [low, high] or false",
            "count": "'auto' or a whole number", "qa": "a band number, a band name or a path",
            "pattern": f"a string like {self.example!r}",
        }[self.kind]
        limits = []
        if self.low is not None:
            limits.append(f"{'>' if self.low_open else '>='} {self.low:g}")
        if self.high is not None:
            limits.append(f"{'<' if self.high_open else '<='} {self.high:g}")
        return words + (f" {' and '.join(limits)}" if limits else "")


@dataclass(frozen=True)
class Section:
    """A table of the plan: its name (dotted for sub-tables), what it is for, and its keys."""

    name: str
    help: str
    keys: tuple[Key, ...]
    optional: bool = True

    def key(self, name: str) -> Key | None:
        return next((k for k in self.keys if k.name == name), None)


def _choices(enum_cls: Any) -> tuple[str, ...]:
    return tuple(m.value for m in enum_cls)


@functools.lru_cache(maxsize=1)
def schema() -> tuple[Section, ...]:
    """Every section of a plan file, in the order the template writes them."""
    from ...accuracy import DEFAULT_MIN_PER_CLASS
    from ...cube.seasons import SeasonScheme
    from ...cube.zones import ZoneRaster
    from ...extraction import CountMethod, ExtractionMethod
    from ...pruning import PruningMethod
    from ...sensors import list_sensors
    from ...solvers import Constraint
    from ...trend import DEFAULT_CORRECTION, MannKendallCorrection
    from ..stack import Resampling

    K = Key
    return (
        Section("inputs", "The image stack and how to read it.", (
            K("stack", "paths", "Image stack: a folder of dated GeoTIFFs, GeoTIFF files or a glob, a NetCDF cube, or "
              "a folder / STAC file of delivered Level-2 products. Relative paths start at this file's folder.",
              required=True, example="stack"),
            K("sensor", "choice", "Built-in sensor of a plain stack (not for delivered products).",
              choices=list_sensors(), example="landsat-8-oli"),
            K("response", "path", "Band response table of a sensor that is not built in (instead of sensor).",
              example="responses.csv"),
            K("band_names", "names", "Sensor band names of the files' bands, in file order. Default: the files' band "
              "descriptions, else every band of the sensor.", example=["B2", "B3", "B4", "B5", "B6", "B7"]),
            K("dates", "path", "CSV with columns file,date. Default: dates from the file names.", example="dates.csv"),
            K("scale", "float", "Reflectance = stored value x scale + offset. Default: the files' own scale, else 1.",
              example=0.0001),
            K("offset", "float", "See scale. Default: the files' own offset, else 0.", example=0.0),
            K("roles", "names", "Delivered products: band roles to unmix on. Default: blue, green, red, nir, swir1, "
              "swir2.", example=["blue", "green", "red", "nir", "swir1", "swir2"]),
            K("band_adjustment", "bool", "Delivered products: adjust ETM+ and MSI dates to OLI with published "
              "coefficients.", default=False),
        ), optional=False),
        Section("grid", "The grid every date is put on.", (
            K("align", "bool", "Plain stack: warp dates on another grid onto the first date's grid instead of "
              "stopping.", default=False),
            K("resampling", "choice", "Resampling of align.", default="nearest", choices=_choices(Resampling)),
            K("file", "path", "Delivered products: a raster whose CRS, transform and shape are the target grid. "
              "Default: the first scene's grid.", example="grid.tif"),
            K("crs", "str", "Delivered products: target CRS (with resolution and bounds).", example="EPSG:32633"),
            K("resolution", "float", "Target pixel size [units of crs, metres for a projected CRS].", low=0,
              low_open=True, example=30.0),
            K("bounds", "floats4", "Target extent [units of crs].", example=[500000.0, 4090000.0, 510000.0, 4100000.0]),
            K("chunk_size", "int", "Chunk edge [pixels]. Default: about 1024, following the files' tiles.", low=16,
              example=1024),
        )),
        Section("masks", "What counts as no data.", (
            K("qa", "qa", "Plain stack: quality band (number from 1 or description) or a folder of per-date mask "
              "files.", example="QA_PIXEL"),
            K("qa_bits", "ints", "Plain stack: QA bits (0 = least significant) that mark a pixel invalid. Default "
              "with qa: any non-zero value.", low=0, high=63, example=[1, 3, 4]),
            K("names", "names", "Delivered products: Landsat QA_PIXEL flags and Sentinel-2 SCL classes that mark "
              "no data. Default: clouds, shadows, snow, fill.", example=["cloud", "cloud_shadow"]),
            K("share", "float", "Delivered products: a target pixel is masked when masked quality pixels cover more "
              "than this share of it (0 = any).", default=0.0, low=0, high=1, high_open=True),
            K("reflectance_range", "range", "Plausible reflectance [low, high]; a pixel with a band outside it is no "
              "data on that date. false turns the check off.", default=[-0.5, 2.0]),
        )),
        Section("endmembers", "Where the endmembers come from: exactly one of [endmembers.library], "
                "[endmembers.extraction] or [endmembers.bundles].", ()),
        Section("endmembers.library", "Endmembers from a spectral library.", (
            K("file", "path", "Spectral library CSV.", required=True, example="library.csv"),
            K("names", "names", "Library spectra to use. Default: all.", example=["green_vegetation", "soil"]),
        )),
        Section("endmembers.extraction", "Endmembers found in the image (all dates pooled); plain stacks read "
                "without scale, offset, dates or masks.", (
            K("method", "choice", "Extraction method.", default="vca", choices=_choices(ExtractionMethod)),
            K("count", "count", "Number of endmembers, or 'auto' to estimate it.", default="auto", low=2),
            K("count_method", "choice", "Estimator of count = 'auto'.", default="hysime", choices=_choices(CountMethod)),
            K("reference", "path", "Library that names the found endmembers (matched by spectral angle).",
              example="library.csv"),
            K("max_angle", "float", "Largest spectral angle accepted as a match [degree].", default=10.0, low=0),
            K("sample", "int", "Valid pixel-dates drawn at random to search.", default=1_000_000, low=100),
            K("seed", "int", "Seed of the sample and the method.", default=0, low=0),
        )),
        Section("endmembers.bundles", "Bundles of spectra per class for multiple endmember unmixing (MESMA).", (
            K("file", "path", "Bundle library CSV; every spectrum labelled with its class (class 'shade' is the "
              "photometric shade).", required=True, example="bundles.csv"),
            K("prune", "choice", "Keep the most representative spectra of each class first.", default="none",
              choices=("none", *_choices(PruningMethod))),
            K("keep", "int", "Spectra kept per class by prune.", default=1, low=1),
            K("misfit_limit", "float", "Largest model RMSE accepted [reflectance].", default=0.025, low=0,
              low_open=True),
        )),
        Section("unmixing", "How the fractions are estimated and written.", (
            K("constraint", "choice", "Constraint on the fractions (fcls: non-negative, summing to one).",
              default=Constraint.FCLS.value, choices=_choices(Constraint)),
            K("compress_level", "int", "zlib level of fractions.nc (0 = none).", default=1, low=0, high=9),
            K("cog", "bool", "Also write one Cloud-Optimized GeoTIFF per endmember.", default=False),
        )),
        Section("dates", "Comparability of the dates: season window, co-registration, radiometry.", (
            K("reference_date", "date", "Date the others are compared with. Default: the date with most valid "
              "pixels.", example="2019-07-15"),
            K("registration_band", "str", "Band the shifts are measured on. Default: near infrared.", example="B5"),
            K("max_shift", "float", "Dates shifted more than this are left out (or resampled) [pixels].",
              default=0.5, low=0, low_open=True),
            K("correct_shift", "bool", "Resample shifted dates by their measured shift instead of leaving them out.",
              default=False),
            K("normalise", "bool", "Apply the relative radiometric normalisation (else measure and report only).",
              default=False),
            K("gain_tolerance", "float", "Flag a date whose gain departs from 1 by more than this.", default=0.05,
              low=0, low_open=True),
            K("registration_check", "bool", "Measure the co-registration of the dates.", default=True),
            K("radiometry_check", "bool", "Measure the radiometric comparability of the dates.", default=True),
            K("doy_window", "pair", "Keep dates whose day of year lies in [start, end] (end < start wraps over the "
              "new year).", low=1, high=366, example=[60, 120]),
            K("years", "pattern", "Keep these years: a range or a list.", pattern=r"\d{4}(-\d{4})?(,\d{4}(-\d{4})?)*",
              example="2005-2014"),
            K("first_date", "date", "Keep dates from this one on.", example="2005-01-01"),
            K("last_date", "date", "Keep dates up to this one.", example="2014-12-31"),
            K("composite", "choice", "Reduce each year to one composite inside the window.",
              choices=("median", "closest"), example="median"),
            K("target_doy", "int", "Day of year of composite = 'closest'. Default: the middle of the window.",
              low=1, high=366, example=90),
        )),
        Section("trends", "Per-pixel trajectories of the fraction series.", (
            K("run", "bool", "Run this step.", default=True),
            K("fdr_q", "float", "False discovery rate over each endmember map.", default=0.05, low=0, high=1,
              low_open=True, high_open=True),
            K("min_slope", "float", "Smallest |Sen slope| called gradual change [fraction per year].", default=0.005,
              low=0),
            K("min_step", "float", "Smallest |step| called abrupt change [fraction].", default=0.05, low=0),
            K("correction", "choice", "Serial-correlation correction of the Mann-Kendall test.",
              default=DEFAULT_CORRECTION.value, choices=_choices(MannKendallCorrection)),
            K("season_scheme", "choice", "Seasonal Kendall test by month or meteorological season.", default="none",
              choices=_choices(SeasonScheme)),
            K("min_valid", "int", "Fewest valid dates a pixel needs for a label.", default=8, low=3),
            K("cog", "bool", "Also write the trend maps as Cloud-Optimized GeoTIFFs.", default=False),
        )),
        Section("rules", "Modification rules and cover classes (needs [trends]).", (
            K("file", "path", "Rules file, one rule per line (see 'unmix trends --help').", example="rules.txt"),
        )),
        Section("zones", "Area tables per zone, and cover change between two periods (needs [trends]).", (
            K("file", "path", "Zone polygons (GeoJSON, GeoPackage or Shapefile).", example="zones.geojson"),
            K("field", "str", "Attribute holding each zone's name.", default="name"),
            K("pixels", "choice", "centre: a pixel is in a zone when its centre is; share: by area share.",
              default="centre", choices=_choices(ZoneRaster)),
            K("cover_change", "bool", "Cover class per pixel in two periods and a from-to table [ha].",
              default=False),
            K("periods", "pattern", "The two periods of cover_change. Default: the first and the last year.",
              pattern=r"\d{4}(-\d{4})?,\d{4}(-\d{4})?", example="2005-2006,2013-2014"),
        )),
        Section("report", "The HTML report (needs [trends]).", (
            K("run", "bool", "Run this step.", default=True),
            K("title", "str", "Title of the report.", default="Land-cover fractions and their trends"),
            K("folder", "str", "Folder of the report inside the output folder.", default="report"),
        )),
        Section("sample", "A stratified random sample of a class map to interpret (needs [trends]).", (
            K("run", "bool", "Run this step.", default=False),
            K("map", "str", "Class map: 'trajectory' (with endmember) or a rule's name.", default="trajectory"),
            K("endmember", "str", "Endmember whose trajectory map is sampled.", example="green_vegetation"),
            K("total", "int", "Total sample size. Default: the size reaching target_se.", low=1, example=200),
            K("per_class", "int", "The same sample size in every class, instead of total.", low=1, example=50),
            K("min_per_class", "int", "Smallest sample of a class.", default=DEFAULT_MIN_PER_CLASS, low=0),
            K("target_se", "float", "Standard error of the overall accuracy the default size aims at.",
              default=0.01, low=0, high=1, low_open=True, high_open=True),
            K("expected_accuracy", "str", "Expected user's accuracy: one value, or CLASS=VALUE pairs.", default="0.8"),
            K("seed", "int", "Seed of the draw.", default=0, low=0),
            K("folder", "str", "Folder of the sample inside the output folder.", default="sample"),
        )),
        Section("compute", "Where the work runs.", (
            K("workers", "int", "Local cluster of this many worker processes. Default: threads in this process.",
              low=1, example=2),
            K("scheduler", "str", "Address of a running dask cluster (instead of workers).",
              example="tcp://10.0.0.5:8786"),
        )),
        Section("outputs", "Where the products go.", (
            K("folder", "out", "Folder of the products (created if missing).", required=True, example="products"),
            K("overwrite", "bool", "Replace existing products.", default=False),
        ), optional=False),
    )


def all_dotted_keys() -> list[str]:
    """Every key as ``section.key`` (for suggestions in error messages)."""
    return [f"{s.name}.{k.name}" for s in schema() for k in s.keys]
