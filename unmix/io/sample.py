"""Accuracy samples on disk: the points to interpret (CSV + GeoJSON), the strata table, the interpreted
sample read back and checked, reference fraction points, and the assessment's tables and figure.

Files written here (our own layout):

- ``sample.csv``: ``point_id, map_class, map_code, row, col, x, y, lon, lat, reference`` with an empty
  ``reference`` column for the interpreter; ``x``/``y`` are pixel centres in the map's CRS, ``lon``/``lat``
  WGS 84 degrees (empty when the map has no CRS).
- ``sample.geojson``: the same points as a FeatureCollection whose coordinates are in the map's CRS, named
  in a ``crs`` member (``urn:ogc:def:crs:EPSG::<code>``, read by GDAL and QGIS) and in full in a
  ``crs_wkt`` member; ``reference`` is null.
- ``strata.csv``: ``map_class, map_code, mapped_pixels, pixel_area_m2, mapped_area_ha, n_sample``, what
  the assessment needs besides the interpreted points.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import SampleFormatError, SampleReadError
from .products.claim import ProductSet
from .products.provenance import plan_attrs

__all__ = ["SAMPLE_FILES", "write_interpreted_sample", "write_sample", "read_sample", "read_strata", "write_tables", "write_figure",
           "read_reference_points"]

#: Files :func:`write_sample` writes into its folder.
SAMPLE_FILES = ("sample.csv", "sample.geojson", "strata.csv")
_STRATA_COLUMNS = ["map_class", "map_code", "mapped_pixels", "pixel_area_m2", "mapped_area_ha", "n_sample"]


def _lon_lat(x: np.ndarray, y: np.ndarray, crs_wkt: str | None) -> tuple[np.ndarray, np.ndarray]:
    if not crs_wkt or x.size == 0:
        return np.full(x.size, np.nan), np.full(x.size, np.nan)
    from rasterio.crs import CRS
    from rasterio.warp import transform

    lon, lat = transform(CRS.from_wkt(crs_wkt), CRS.from_epsg(4326), x.tolist(), y.tolist())
    return np.asarray(lon), np.asarray(lat)


def _crs_members(crs_wkt: str | None) -> dict:
    if not crs_wkt:
        return {}
    from rasterio.crs import CRS

    epsg = CRS.from_wkt(crs_wkt).to_epsg()
    members: dict = {"crs_wkt": crs_wkt}
    if epsg is not None:
        members["crs"] = {"type": "name", "properties": {"name": f"urn:ogc:def:crs:EPSG::{epsg}"}}
    return members


def _number(v):
    return None if isinstance(v, float) and not np.isfinite(v) else v


def write_sample(points: pd.DataFrame, strata: pd.DataFrame, out_dir: str | os.PathLike, *, crs_wkt: str | None,
                 products: ProductSet, about: dict | None = None) -> list[Path]:
    """Write ``sample.csv``, ``sample.geojson`` and ``strata.csv`` into ``out_dir`` as part of ``products``.

    Parameters
    ----------
    points : pandas.DataFrame
        From :func:`unmix.cube.accuracy.sample_points` (``point_id, map_class, map_code, row, col, x, y``).
    strata : pandas.DataFrame
        From :func:`unmix.cube.accuracy.strata_table` with an ``n_sample`` column.
    crs_wkt : str or None
        CRS of ``x``/``y``.
    products : ProductSet
        The claimed set holding the three paths (committed by the caller).
    about : dict, optional
        Provenance (version, product, map, seed) kept in the GeoJSON's ``unmix`` member.
    """
    out = Path(out_dir)
    points = points.copy()
    points["lon"], points["lat"] = _lon_lat(points["x"].to_numpy(float), points["y"].to_numpy(float), crs_wkt)
    points["reference"] = ""
    with products.writing(out / "sample.csv") as tmp:
        points.to_csv(tmp, index=False)
    features = []
    for rec in points.to_dict(orient="records"):
        props = {k: _number(v) for k, v in rec.items() if k not in ("x", "y")}
        props.update(x=rec["x"], y=rec["y"], reference=None)
        features.append({"type": "Feature", "id": int(rec["point_id"]),
                         "geometry": {"type": "Point", "coordinates": [rec["x"], rec["y"]]},
                         "properties": {k: (v.item() if isinstance(v, np.generic) else v) for k, v in props.items()}})
    about = {**(about or {}), **plan_attrs()}  # the plan of an `unmix run`, when one is running
    collection = {"type": "FeatureCollection", "name": "sample", **_crs_members(crs_wkt),
                  **({"unmix": about} if about else {}), "features": features}
    with products.writing(out / "sample.geojson") as tmp:
        tmp.write_text(json.dumps(collection, indent=1), encoding="utf-8")
    with products.writing(out / "strata.csv") as tmp:
        strata[_STRATA_COLUMNS].to_csv(tmp, index=False)
    return [out / name for name in SAMPLE_FILES]


def _open_table(path: Path) -> tuple[pd.DataFrame, list[str]]:
    """Rows as strings and how to name each row in a message."""
    if not path.is_file():
        raise SampleReadError(f"{path} not found; give the sample written by 'unmix sample' after interpretation")
    try:
        if path.suffix.lower() in (".geojson", ".json"):
            doc = json.loads(path.read_text(encoding="utf-8"))
            rows = [dict(f.get("properties") or {}) for f in doc["features"]]
            table = pd.DataFrame(rows).astype(object).where(lambda t: t.notna(), "").astype(str)
            return table, [f"feature {i + 1}" for i in range(len(table))]
        table = pd.read_csv(path, dtype=str, keep_default_na=False)
        return table, [f"line {i + 2}" for i in range(len(table))]
    except (OSError, UnicodeDecodeError) as exc:
        raise SampleReadError(f"cannot read {path}: {exc}") from None
    except (ValueError, KeyError, TypeError, pd.errors.ParserError) as exc:
        raise SampleFormatError(f"{path} is not a sample table (CSV with a header, or a GeoJSON "
                                f"FeatureCollection): {exc}") from None


def _where(table: pd.DataFrame, places: list[str], i: int) -> str:
    point = f" (point_id {table['point_id'].iloc[i]})" if "point_id" in table else ""
    return f"{places[i]}{point}"


def read_sample(path: str | os.PathLike, classes: list[str]) -> pd.DataFrame:
    """Read an interpreted sample (CSV or GeoJSON) and check it against the map's classes.

    Parameters
    ----------
    path : path
        ``sample.csv`` or ``sample.geojson`` with its ``reference`` column filled in.
    classes : list of str
        The map classes (from ``strata.csv``): every ``map_class`` and ``reference`` must be one of
        them (reference names are matched ignoring case and surrounding blanks).

    Returns
    -------
    pandas.DataFrame
        Columns ``map_class`` and ``reference`` (canonical class names), one row per point.

    Raises
    ------
    SampleFormatError
        A column is missing, a point has no reference class, or a class is unknown: one message naming
        the file, the line (CSV, header = line 1) or feature, the point and the known classes.
    """
    path = Path(path)
    table, places = _open_table(path)
    for column in ("map_class", "reference"):
        if column not in table.columns:
            raise SampleFormatError(f"{path} has no '{column}' column; columns found: {', '.join(table.columns)}")
    canonical = {c.strip().lower(): c for c in classes}
    known = ", ".join(classes)
    reference = table["reference"].str.strip()
    empty = np.flatnonzero(reference.eq("").to_numpy())
    if empty.size:
        raise SampleFormatError(
            f"{path}: {empty.size} point(s) have no reference class, the first on {_where(table, places, empty[0])}; "
            f"fill in the reference column of every point with one of: {known}")
    for column, values in (("map_class", table["map_class"].str.strip()), ("reference", reference)):
        unknown = np.flatnonzero(~values.str.lower().isin(list(canonical)).to_numpy())
        if unknown.size:
            i = unknown[0]
            raise SampleFormatError(
                f"{path}, {_where(table, places, i)}: {column} {values.iloc[i]!r} is not a class of the map "
                f"({unknown.size} such point(s)); known classes: {known}")
    return pd.DataFrame({"map_class": [canonical[v.lower()] for v in table["map_class"].str.strip()],
                         "reference": [canonical[v.lower()] for v in reference]})


def read_strata(path: str | os.PathLike) -> pd.DataFrame:
    """Read ``strata.csv`` written by :func:`write_sample` (classes, mapped pixels, pixel area)."""
    path = Path(path)
    if not path.is_file():
        raise SampleReadError(f"strata table {path} not found; it is written by 'unmix sample' beside the sample "
                              "(give it with --strata)")
    try:
        table = pd.read_csv(path, dtype={"map_class": str})
    except (OSError, UnicodeDecodeError) as exc:
        raise SampleReadError(f"cannot read {path}: {exc}") from None
    except (ValueError, pd.errors.ParserError) as exc:
        raise SampleFormatError(f"{path} is not a strata table: {exc}") from None
    missing = [c for c in _STRATA_COLUMNS if c not in table.columns]
    if missing or table.empty:
        raise SampleFormatError(f"{path} is not a strata table written by 'unmix sample': missing columns "
                                f"{', '.join(missing) or '(no rows)'}")
    pixels = pd.to_numeric(table["mapped_pixels"], errors="coerce")
    if pixels.isna().any() or (pixels < 0).any():
        raise SampleFormatError(f"{path}: mapped_pixels must be non-negative numbers")
    return table


def write_tables(tables: dict[str, pd.DataFrame], out_dir: str | os.PathLike, *, products: ProductSet,
                 index: bool = False) -> list[Path]:
    """Write each table as ``<name>.csv`` in ``out_dir`` as part of a claimed set of products."""
    paths = []
    for name, df in tables.items():
        path = Path(out_dir) / f"{name}.csv"
        with products.writing(path) as tmp:
            df.to_csv(tmp, index=index, float_format="%.8g")
        paths.append(path)
    return paths


def write_figure(fig, path: str | os.PathLike, *, products: ProductSet, dpi: int = 150) -> Path:
    """Save a matplotlib figure as PNG at ``path`` as part of a claimed set of products."""
    with products.writing(path) as tmp:
        fig.savefig(tmp, format="png", dpi=dpi)
    return Path(path)


def read_reference_points(path: str | os.PathLike, endmembers: list[str], crs_wkt: str | None) -> pd.DataFrame:
    """Read reference fractions at points (CSV): coordinates, an optional date, one column per endmember.

    Columns: ``x`` and ``y`` in the product's CRS, or ``lon`` and ``lat`` (WGS 84 degrees); ``date``
    (ISO 8601) optional; one column per endmember named as in the product with the reference fraction
    0..1 (endmembers not given are not compared; an empty cell is no data). Other columns are kept.

    Returns
    -------
    pandas.DataFrame
        ``x``, ``y`` in the product's CRS, ``date`` (datetime64, when given) and the endmember columns as
        floats.
    """
    path = Path(path)
    if not path.is_file():
        raise SampleReadError(f"reference points {path} not found")
    try:
        table = pd.read_csv(path)
    except (OSError, UnicodeDecodeError) as exc:
        raise SampleReadError(f"cannot read {path}: {exc}") from None
    except (ValueError, pd.errors.ParserError) as exc:
        raise SampleFormatError(f"{path} is not a CSV table with a header: {exc}") from None
    given = [e for e in endmembers if e in table.columns]
    if not given:
        raise SampleFormatError(f"{path} has no column named after an endmember of the product "
                                f"({', '.join(endmembers)}); columns found: {', '.join(map(str, table.columns))}")
    for column in given + [c for c in ("x", "y", "lon", "lat") if c in table.columns]:
        values = pd.to_numeric(table[column], errors="coerce")
        bad = np.flatnonzero(values.isna().to_numpy() & table[column].notna().to_numpy())
        if bad.size:
            raise SampleFormatError(f"{path}, line {bad[0] + 2}: column {column} holds {table[column].iloc[bad[0]]!r}, "
                                    "not a number")
        table[column] = values.astype(float)
    for column in given:
        outside = np.flatnonzero(((table[column] < 0) | (table[column] > 1)).to_numpy())
        if outside.size:
            raise SampleFormatError(f"{path}, line {outside[0] + 2}: reference fraction {column} = "
                                    f"{table[column].iloc[outside[0]]} lies outside 0..1")
    if {"x", "y"} <= set(table.columns):
        pass
    elif {"lon", "lat"} <= set(table.columns):
        if not crs_wkt:
            raise SampleFormatError(f"{path} gives lon/lat but the product has no CRS; give x and y columns")
        from rasterio.crs import CRS
        from rasterio.warp import transform

        x, y = transform(CRS.from_epsg(4326), CRS.from_wkt(crs_wkt), table["lon"].tolist(), table["lat"].tolist())
        table["x"], table["y"] = np.asarray(x), np.asarray(y)
    else:
        raise SampleFormatError(f"{path} needs x and y columns (product CRS) or lon and lat (WGS 84 degrees)")
    missing = np.flatnonzero(table[["x", "y"]].isna().any(axis=1).to_numpy())
    if missing.size:
        raise SampleFormatError(f"{path}, line {missing[0] + 2}: the point has no coordinates")
    if "date" in table.columns:
        dates = pd.to_datetime(table["date"].astype(str), format="ISO8601", errors="coerce")
        bad = np.flatnonzero(dates.isna().to_numpy())
        if bad.size:
            raise SampleFormatError(f"{path}, line {bad[0] + 2}: date {table['date'].iloc[bad[0]]!r} is not a date "
                                    "(use YYYY-MM-DD)")
        table["date"] = dates
    return table


def write_interpreted_sample(sample_csv: str | os.PathLike, interpret, path: str | os.PathLike, *,
                             overwrite: bool = False) -> Path:
    """A copy of ``sample.csv`` with its ``reference`` column filled, written atomically to ``path``: what an
    interpreter hands back. ``interpret(table)`` gives one reference class per point (the table's order)."""
    from .products.atomic import atomic_path

    table = pd.read_csv(sample_csv, dtype={"reference": str}, keep_default_na=False)
    reference = [str(r) for r in interpret(table)]
    if len(reference) != len(table):
        raise SampleFormatError(f"{sample_csv} has {len(table)} points but {len(reference)} reference classes "
                                "were given")
    table["reference"] = reference
    with atomic_path(path, overwrite=overwrite) as tmp:
        table.to_csv(tmp, index=False)
    return Path(path)
