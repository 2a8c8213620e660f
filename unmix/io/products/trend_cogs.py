"""The trend product's maps as Cloud-Optimized GeoTIFFs for a GIS, in the same product set as ``trends.nc``.

Files written into the output folder (one band per endmember unless noted; band descriptions are
the endmember names; every file has its nodata value set and the run's provenance as tags):

=====================  ========  ========  ============================================================
file                   type      nodata    values
=====================  ========  ========  ============================================================
``trajectory.tif``     uint8     255       the trajectory codes of ``trends.nc`` (0 stable ..
                                           5 insufficient_data; 255 is never written)
``slope.tif``          float32   NaN       Sen slope [1/yr]
``q_value.tif``        float32   NaN       FDR-adjusted trend-test p-value [1]
``change_date.tif``    float32   NaN       first date after an abrupt break as a decimal year
                                           (:func:`unmix.dates.decimal_years`: calendar year plus
                                           the elapsed fraction of that year); NaN = no abrupt change
``rule_<name>.tif``    uint8     255       one band: 0 false, 1 true, 255 insufficient_data
=====================  ========  ========  ============================================================

Categories. GeoTIFF has no place for category names, and holds a colour table only for a
single-band paletted image (GDAL turns the second band of a paletted file into alpha). So:

* every categorical file carries CF-style tags ``flag_values`` / ``flag_meanings`` (dataset and
  band metadata, inside the TIFF, read by any GDAL-based GIS as metadata);
* a single-band rule map also carries its colour table inside the TIFF (palette);
* the category names of every band go into GDAL's auxiliary metadata file beside the image,
  ``<file>.tif.aux.xml`` (``PAMDataset`` / ``PAMRasterBand`` / ``CategoryNames``), which GDAL-based
  software (QGIS, rasterio) reads when it opens the image, with the colour table of band 1
  (``ColorTable``): GDAL's GeoTIFF driver (3.10) ignores an auxiliary colour table of a further band
  but would still mark that band as paletted, so the other endmembers' bands have names and no
  table. The ``.aux.xml`` is a product of the set like the images: written and committed with them.

A raster attribute table is not written (category names and colours cover what one would hold).
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape

import numpy as np
import xarray as xr

from .claim import ProductSet
from .cog import write_cog

__all__ = ["TREND_COG_NODATA", "trend_cog_paths", "write_trend_cogs", "pam_xml"]

#: Nodata value of the categorical (uint8) maps.
TREND_COG_NODATA = 255

_FLOAT_MAPS = {
    "slope": ("1/yr", "average"),
    "q_value": ("1", "nearest"),
}


def _categorical_names(rule_names: Sequence[str]) -> list[str]:
    return ["trajectory.tif", *(f"rule_{r}.tif" for r in rule_names)]


def trend_cog_paths(out: str | os.PathLike, rule_names: Sequence[str]) -> list[Path]:
    """Every file :func:`write_trend_cogs` writes into ``out`` (to claim them before any work).

    Parameters
    ----------
    out : path
        Output folder.
    rule_names : sequence of str
        Names of the rules of the run.

    Returns
    -------
    list of pathlib.Path
        The images, then the ``.aux.xml`` files of the categorical ones.
    """
    out = Path(out)
    images = ["trajectory.tif", "slope.tif", "q_value.tif", "change_date.tif", *(f"rule_{r}.tif" for r in rule_names)]
    return [out / n for n in images] + [out / f"{n}.aux.xml" for n in _categorical_names(rule_names)]


def pam_xml(bands: Sequence[tuple[Mapping[int, str], Mapping[int, tuple[int, int, int, int]] | None]]) -> str:
    """GDAL auxiliary metadata (``.aux.xml``) giving each band its category names and colour table.

    Parameters
    ----------
    bands : sequence of (names, colours)
        Per band: code -> category name, and code -> (red, green, blue, alpha) 0..255 or None (no
        colour table). Codes without a name get an empty one and codes without a colour a transparent
        entry (GDAL indexes both lists by the code).

    Returns
    -------
    str
        The XML document.
    """
    lines = ["<PAMDataset>"]
    for band, (names, colours) in enumerate(bands, start=1):
        top = max([*names, *(colours or {})])
        lines.append(f'  <PAMRasterBand band="{band}">')
        lines.append("    <CategoryNames>")
        lines += [f"      <Category>{escape(names.get(code, ''))}</Category>" for code in range(top + 1)]
        lines.append("    </CategoryNames>")
        if colours is not None:
            lines.append("    <ColorTable>")
            for code in range(top + 1):
                r, g, b, a = colours.get(code, (0, 0, 0, 0))
                lines.append(f'      <Entry c1="{r}" c2="{g}" c3="{b}" c4="{a}"/>')
            lines.append("    </ColorTable>")
        lines.append("  </PAMRasterBand>")
    lines.append("</PAMDataset>")
    return "\n".join(lines) + "\n"


def _flags(da: xr.DataArray) -> dict[int, str]:
    values = np.atleast_1d(da.attrs["flag_values"]).astype(int)
    return dict(zip(values.tolist(), str(da.attrs["flag_meanings"]).split()))


def _write_pam(path: Path, text: str, products: ProductSet) -> None:
    with products.writing(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def _rgba(colour: str) -> tuple[int, int, int, int]:
    """``#RRGGBB`` -> (red, green, blue, 255)."""
    text = colour.lstrip("#")
    if len(text) != 6:
        raise ValueError(f"colour {colour!r} is not #RRGGBB")
    return int(text[0:2], 16), int(text[2:4], 16), int(text[4:6], 16), 255


def _decimal_year_map(dates: np.ndarray) -> np.ndarray:
    """datetime64 map -> float32 decimal years, NaN where NaT."""
    from ...dates import decimal_years_or_nan

    return decimal_years_or_nan(dates).astype("float32")


def write_trend_cogs(
    product: xr.Dataset,
    out: str | os.PathLike,
    *,
    rule_names: Sequence[str],
    colours: Mapping[str, Mapping[str, str]],
    tags: Mapping[str, Any],
    products: ProductSet,
    overwrite: bool = False,
    blocksize: int = 512,
) -> list[Path]:
    """Write the trajectory, slope, q-value, change-date and rule maps of a trend product as COGs.

    Parameters
    ----------
    product : xarray.Dataset
        A trend product as written by ``unmix trends`` (``trajectory``, ``slope``, ``q_value``,
        ``change_date`` on (endmember, y, x), one (y, x) map per rule), georeferenced.
    out : path
        Output folder.
    rule_names : sequence of str
        Rules whose maps to write (variables of ``product``).
    colours : mapping
        ``{"trajectory": {label: colour}, "rule": {label: colour}}`` with ``#RRGGBB`` colours,
        for the colour tables (labels as in the variables' ``flag_meanings``).
    tags : mapping
        Provenance tags stored in every file.
    products : ProductSet
        The claimed set (holding :func:`trend_cog_paths`); the files appear at its commit.
    overwrite : bool
        Replace existing files.
    blocksize : int
        Tile size [pixels]; overviews are made down to about one tile. Categorical maps get
        ``mode`` overviews (the most frequent code), slopes ``average``, q-values and dates ``nearest``.

    Returns
    -------
    list of pathlib.Path
        The files written (images and auxiliary metadata).
    """
    out = Path(out)
    endmembers = [str(e) for e in product["endmember"].values]
    per_band = [{"endmember": e} for e in endmembers]
    common = {"products": products, "overwrite": overwrite, "descriptions": endmembers, "blocksize": blocksize}
    written: list[Path] = []

    def var_tags(da: xr.DataArray, **extra: Any) -> dict[str, Any]:
        keep = {k: v for k, v in da.attrs.items() if k in ("long_name", "units", "comment", "rule")}
        if "flag_values" in da.attrs:
            keep["flag_values"] = " ".join(str(int(v)) for v in np.atleast_1d(da.attrs["flag_values"]))
            keep["flag_meanings"] = str(da.attrs["flag_meanings"])
        return {**tags, **keep, "variable": da.name, **extra}

    traj = product["trajectory"]
    flags = _flags(traj)
    path = out / "trajectory.tif"
    write_cog(traj.astype("uint8"), path, dtype="uint8", nodata=TREND_COG_NODATA, resampling="mode",
              band_tags=[{**b, "flag_values": " ".join(map(str, flags)), "flag_meanings": " ".join(flags.values())}
                         for b in per_band],
              tags=var_tags(traj, nodata_meaning=f"{TREND_COG_NODATA}: not used (every pixel has a code; "
                                                 "too few dates is the insufficient_data code)"), **common)
    table = {code: _rgba(colours["trajectory"][name]) for code, name in flags.items()}
    # GDAL's GeoTIFF driver takes an auxiliary colour table for band 1 only (further bands would be marked
    # as paletted without a table): band 1 gets it, every band its category names
    bands = [(flags, table if i == 0 else None) for i in range(len(endmembers))]
    _write_pam(out / "trajectory.tif.aux.xml", pam_xml(bands), products)
    written += [path, out / "trajectory.tif.aux.xml"]

    for name, (units, resampling) in _FLOAT_MAPS.items():
        path = out / f"{name}.tif"
        write_cog(product[name].astype("float32"), path, units=units, resampling=resampling, band_tags=per_band,
                  tags=var_tags(product[name], nodata_meaning="NaN: no value (too few dates or no data)"), **common)
        written.append(path)

    change = product["change_date"]
    years = xr.apply_ufunc(_decimal_year_map, change, dask="parallelized", output_dtypes=[np.float32])
    path = out / "change_date.tif"
    write_cog(years, path, units="year", resampling="nearest", band_tags=per_band,
              tags=var_tags(change, units="year", encoding="decimal year: calendar year plus the elapsed fraction "
                            "of that year (2020-07-02 = 2020.5)", nodata_meaning="NaN: no abrupt change"), **common)
    written.append(path)

    for rule in rule_names:
        da = product[rule]
        rule_flags = _flags(da)
        rule_table = {code: _rgba(colours["rule"][label]) for code, label in rule_flags.items()}
        rule_table[TREND_COG_NODATA] = (*rule_table.get(TREND_COG_NODATA, (128, 128, 128, 255))[:3], 0)
        path = out / f"rule_{rule}.tif"
        write_cog(da.astype("uint8"), path, dtype="uint8", nodata=TREND_COG_NODATA, resampling="mode",
                  descriptions=[rule], colormap=rule_table, products=products, overwrite=overwrite, blocksize=blocksize,
                  band_tags=[{"rule": str(da.attrs.get("rule", rule))}],
                  tags=var_tags(da, nodata_meaning=f"{TREND_COG_NODATA}: insufficient_data"))
        aux = out / f"rule_{rule}.tif.aux.xml"
        _write_pam(aux, pam_xml([(rule_flags, rule_table)]), products)
        written += [path, aux]
    return written
