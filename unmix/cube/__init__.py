"""xarray/dask layer: maps the kernels over lazy labelled cubes. No paths, no printing."""

from .fractions import unmix_cube
from .mesma import mesma_cube
from .trends import trend_cube

__all__ = ["mesma_cube", "trend_cube", "unmix_cube"]
