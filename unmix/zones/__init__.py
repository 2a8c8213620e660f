"""Zones and ground areas (kernels on numpy arrays).

================  ===================================================================================
module            holds
================  ===================================================================================
``pixel_area``    :func:`planar_pixel_area` (projected grids), :func:`ellipsoidal_row_areas` (exact
                  areas of longitude / latitude cells)
``tally``         :func:`zone_class_tally`: pixels and area of each class in each zone, per block
================  ===================================================================================

Rasterising zone polygons onto a product grid and the per-zone area tables live in
:mod:`unmix.cube.zones`; reading zone files in :mod:`unmix.io.zones`.
"""

from __future__ import annotations

from .pixel_area import ellipsoidal_row_areas, planar_pixel_area
from .tally import zone_class_tally

__all__ = ["ellipsoidal_row_areas", "planar_pixel_area", "zone_class_tally"]
