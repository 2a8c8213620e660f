"""What an analyst would bring to the invented Marrow Creek scene besides the images: district polygons (in
longitude / latitude, another CRS than the raster's), points to follow over time, and a reference sample
interpreted from the scenario's known truth (standing in for interpretation of fine-resolution imagery).

All invented: the districts, their names and the points are made up for the demo.
"""

from __future__ import annotations

import numpy as np

from .scenario import ZONES, Scenario
from .score import strong_change

__all__ = ["DISTRICT_FIELD", "DISTRICTS", "district_polygons", "demo_points", "true_rule", "interpret_sample"]

#: Attribute of the districts file holding the names.
DISTRICT_FIELD = "district"
#: Invented district names and their corners as (column, row) shares of the scene (north-west first).
DISTRICTS = {
    "Koppies ward": [(0, 0), (0.5, 0), (0.55, 0.6), (0, 0.6)],
    "Windpump ward": [(0.5, 0), (1, 0), (1, 0.6), (0.55, 0.6)],
    "South camp": [(0, 0.6), (0.55, 0.6), (0.6, 1), (0, 1)],
    "Sand edge ward": [(0.55, 0.6), (1, 0.6), (1, 1), (0.6, 1)],
}


def district_polygons(scenario: Scenario, crs: str = "EPSG:4326") -> tuple[list[str], list]:
    """The districts as shapely polygons in ``crs`` (edges densified before reprojecting)."""
    import shapely
    from pyproj import Transformer

    ny, nx = scenario.zone.shape
    a, _, c, _, e, f = scenario.transform
    to = Transformer.from_crs(f"EPSG:{scenario.crs_epsg}", crs, always_xy=True)
    polygons = []
    for corners in DISTRICTS.values():
        ring = shapely.segmentize(shapely.Polygon([(c + a * nx * u, f + e * ny * v) for u, v in corners]),
                                  max_segment_length=abs(a) * 4)
        x, y = np.asarray(ring.exterior.coords).T
        lon, lat = to.transform(x, y)
        polygons.append(shapely.Polygon(np.column_stack([lon, lat])))
    return list(DISTRICTS), polygons


def demo_points(scenario: Scenario) -> dict[str, tuple[float, float]]:
    """Points in the raster's CRS: the water point, the dune front, the pivot centre, the rested paddock."""
    ny, nx = scenario.zone.shape
    a, _, c, _, e, f = scenario.transform

    def at(u: float, v: float) -> tuple[float, float]:
        col, row = int(u * nx), int(v * ny)
        return c + a * (col + 0.5), f + e * (row + 0.5)

    return {"water point": at(0.28, 0.35), "dune front": at(0.9, 0.5), "pivot centre": at(0.62, 0.30),
            "rested paddock": at(0.12, 0.88)}


def true_rule(scenario: Scenario, rule: str = "desertification") -> np.ndarray:
    """Where the invented story makes ``rule`` true: desertification in the dune sheet and the strong part of
    the piosphere; clearing on the pivot disc; recovery in the rested paddock."""
    zone = scenario.zone
    if rule == "desertification":
        return (zone == ZONES.index("dune")) | ((zone == ZONES.index("grazing")) & strong_change(scenario))
    if rule == "clearing":
        return zone == ZONES.index("pivot")
    if rule == "recovery":
        return zone == ZONES.index("recovery")
    raise ValueError(f"no truth for rule {rule!r}")


def interpret_sample(rows: np.ndarray, cols: np.ndarray, scenario: Scenario, rule: str = "desertification") -> list[str]:
    """The reference class ('true' / 'false') of each sampled pixel, read from the scenario's truth."""
    truth = true_rule(scenario, rule)
    return ["true" if truth[r, c] else "false" for r, c in zip(np.asarray(rows, int), np.asarray(cols, int))]
