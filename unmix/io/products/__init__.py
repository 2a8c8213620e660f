"""Writing and reading products: CF-1.8 NetCDF4 and Cloud-Optimized GeoTIFF, written atomically.

Every product is first written under a hidden temporary name in its destination folder and renamed
into place only when complete, so a reader never sees half a file, an existing product is never
touched without ``overwrite=True`` (:class:`~unmix.errors.OutputExistsError`), and a failure leaves no
partial file behind. Lazy (dask) datasets are computed chunk by chunk while they are written, so
memory is bounded by the chunk size, not the product size.

Georeferencing follows CF and is readable by GDAL and rioxarray: a scalar ``spatial_ref``
grid-mapping variable carries ``crs_wkt`` and ``spatial_ref`` (WKT) plus ``GeoTransform``; every
gridded variable names it in its ``grid_mapping`` attribute; ``x``/``y`` carry ``standard_name`` and
``units``; ``time`` is stored as "days since 1970-01-01".

Provenance lives in global attributes: ``unmix_version``, ``command``, ``parameters`` (JSON),
``endmember_names``, ``input_files``, ``created`` (ISO 8601, UTC), ``history`` and a ``caution``; a
product written by ``unmix run`` also ``plan`` (the normalised plan) and ``plan_sha256``.
"""

from .atomic import atomic_path
from .cog import write_cog
from .grid_mapping import grid_mapping_attrs, xy_attrs
from .netcdf import open_product, write_netcdf
from .provenance import CAUTION, plan_attrs, provenance_attrs, recording_plan

__all__ = [
    "CAUTION",
    "write_netcdf",
    "open_product",
    "write_cog",
    "provenance_attrs",
    "recording_plan",
    "plan_attrs",
    "grid_mapping_attrs",
    "xy_attrs",
    "atomic_path",
]
