"""Archives of delivered Level-2 products: Landsat Collection 2, Sentinel-2 Level-2A.

``find_scenes`` lists the products below a folder; ``open_archive`` stacks them by band role on one
grid as a lazy cube; ``TargetGrid`` / ``grid_from_raster`` / ``grid_from_bounds`` set that grid.
"""

from .grid import TargetGrid, grid_from_bounds, grid_from_raster
from .open import find_scenes, open_archive
from .quality import LANDSAT_DEFAULT_MASK, SCL_DEFAULT_MASK, masked
from .scenes import Scene

__all__ = ["Scene", "TargetGrid", "find_scenes", "grid_from_bounds", "grid_from_raster", "open_archive", "masked",
           "LANDSAT_DEFAULT_MASK", "SCL_DEFAULT_MASK"]
