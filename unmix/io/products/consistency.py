"""Do two products belong together? Same grid (CRS, transform, shape), same dates, same endmembers."""

from __future__ import annotations

import numpy as np
import xarray as xr

from ...cube.georef import georef_of
from ...errors import ProductMismatchError

__all__ = ["check_same_scene"]


def _same_crs(a: str | None, b: str | None) -> bool:
    if a is None or b is None:
        return a is b
    if a == b:
        return True
    from rasterio.crs import CRS

    try:
        return CRS.from_wkt(a) == CRS.from_wkt(b)
    except Exception:  # a WKT rasterio cannot parse: only the identical text matches
        return False


def _crs_name(wkt: str | None) -> str:
    if wkt is None:
        return "none"
    from rasterio.crs import CRS

    try:
        crs = CRS.from_wkt(wkt)
        return crs.to_string() or wkt[:40]
    except Exception:
        return wkt[:40]


def _dates_of_trends(trends: xr.Dataset) -> tuple[str, str, int] | None:
    keys = ("time_coverage_start", "time_coverage_end", "n_dates")
    if not all(k in trends.attrs for k in keys):
        return None
    return str(trends.attrs[keys[0]]), str(trends.attrs[keys[1]]), int(trends.attrs[keys[2]])


def check_same_scene(trends: xr.Dataset, fractions: xr.Dataset, trends_name: str, fractions_name: str) -> None:
    """Raise :class:`~unmix.errors.ProductMismatchError` unless ``trends`` was made from ``fractions``.

    Compares the grid (CRS, affine transform to 1e-6 of a pixel, y/x shape), the dates (first,
    last and count, from the trend product's ``time_coverage_start`` / ``time_coverage_end`` /
    ``n_dates`` attributes when present) and the endmember names. Only metadata is read.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> f = xr.Dataset({"fractions": (("time", "endmember", "y", "x"), np.zeros((2, 1, 2, 2)))},
    ...                coords={"time": np.array(["2020-01-01", "2021-01-01"], "datetime64[ns]"),
    ...                        "endmember": ["gv"], "y": [1.5, 0.5], "x": [0.5, 1.5]})
    >>> t = xr.Dataset({"trajectory": (("endmember", "y", "x"), np.zeros((1, 2, 2), "int8"))},
    ...                coords={"endmember": ["gv"], "y": [1.5, 0.5], "x": [0.5, 1.5]},
    ...                attrs={"time_coverage_start": "2020-01-01", "time_coverage_end": "2021-01-01", "n_dates": 2})
    >>> check_same_scene(t, f, "trends.nc", "fractions.nc")
    """
    def fail(what: str) -> None:
        raise ProductMismatchError(f"{trends_name} and {fractions_name} are not from the same scene: {what}; give "
                                   "the fractions product the trends were computed from")

    shape_t = (trends.sizes.get("y"), trends.sizes.get("x"))
    shape_f = (fractions.sizes.get("y"), fractions.sizes.get("x"))
    if shape_t != shape_f:
        fail(f"grid shape (y, x) {shape_t} against {shape_f}")
    wkt_t, tr_t = georef_of(trends)
    wkt_f, tr_f = georef_of(fractions)
    if not _same_crs(wkt_t, wkt_f):
        fail(f"CRS {_crs_name(wkt_t)} against {_crs_name(wkt_f)}")
    if (tr_t is None) != (tr_f is None) or (
        tr_t is not None and not np.allclose(tr_t, tr_f, rtol=0, atol=1e-6 * max(abs(tr_t[0]), abs(tr_t[4]), 1e-12))
    ):
        fail(f"transform {tr_t} against {tr_f}")
    dates = _dates_of_trends(trends)
    if dates is not None and "time" in fractions.coords:
        times = fractions["time"].values.astype("datetime64[D]")
        have = (str(times[0]), str(times[-1]), int(times.size)) if times.size else ("none", "none", 0)
        if dates != have:
            fail(f"dates {dates[0]}..{dates[1]} ({dates[2]}) against {have[0]}..{have[1]} ({have[2]})")
    if "endmember" in trends.coords and "endmember" in fractions.coords:
        em_t = [str(v) for v in trends["endmember"].values]
        em_f = [str(v) for v in fractions["endmember"].values]
        if em_t != em_f:
            fail(f"endmembers {', '.join(em_t)} against {', '.join(em_f)}")
