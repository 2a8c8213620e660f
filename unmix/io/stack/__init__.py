"""Open an image time stack as a lazy (time, band, y, x) reflectance cube.

This package is the only code that opens stack paths. Three sources are understood:

* a folder of GeoTIFFs (``*.tif`` / ``*.tiff``), one file per date holding all bands of that date;
* a list of such files;
* a NetCDF cube with a variable on dims (time, band, y, x).

GeoTIFFs are read lazily, one dask task per (date, block of tiles), each task opening the file by
its path (so the graph runs on the threaded scheduler and on process-based dask.distributed
workers alike). Files in a plain layout (tiled or stripped; deflate, LZW or no compression;
horizontal predictor for integers, floating-point predictor for floats; little-endian;
(u)int8/16/32, float32 or float64; pixel- or band-interleaved; FillOrder 1, top-left orientation,
no missing tiles, only TIFF 6.0, GeoTIFF and GDAL tags) are read block by block with tifffile +
imagecodecs (:mod:`._tiff_blocks`), with GDAL's values; any other layout, warped dates (``align``)
and quality masks are read with rasterio. Every file is opened, its header and tile index checked
(an edge over :data:`.geotiff.MAX_EDGE` pixels is refused before anything is allocated for it), its
identity recorded (size, modification time, inode, device) and its grid compared with the first
date's when the stack is opened, so a truncated file or a date on another grid is reported before
any computing starts; a file damaged or rewritten later is reported by the task that reads it
(:class:`~unmix.errors.StackReadError`, "modified after the stack was opened"), never read with a
layout that no longer holds.

A NetCDF cube is read through xarray, one dask task per stored chunk; a read that fails while
computing raises :class:`~unmix.errors.StackReadError` naming the file. All its dates share one
grid, so ``align`` changes nothing for it and a ``reference`` grid must match it.

Layout: :mod:`.dates` (dates from names / CSV), :mod:`.files` (which files), :mod:`.geotiff`
(headers, grid checks, the per-date window reader), :mod:`._tiff_blocks` + :mod:`._numba` (direct
block reads with tifffile, compiled decoding), :mod:`.bands` (names, scale, QA), :mod:`.chunks` (chunking, the
dask graph), :mod:`.netcdf` (NetCDF cubes), :mod:`.open` (:func:`open_stack`).

Dates
-----
Taken, in this order of precedence, from

1. ``dates``: a CSV file with columns ``file,date`` (file name or path; ISO date), a mapping
   file -> date, or a sequence of dates in the order of the files;
2. the file name (not the folder), searched for

   a. ``YYYY-MM-DD`` (also with ``_`` or ``.`` as separator),
   b. ``YYYYMMDD`` (a run of exactly 8 digits),
   c. ``YYYYDDD`` (a run of exactly 7 digits: year and day of year 001-366).

   The first pattern that matches anywhere in the name wins; within it the leftmost date is used
   (product names such as ``..._20200115_20200823_...`` put the acquisition date before the
   processing date). Impossible dates and years before 1972 (Landsat 1) or after next year are not
   matches. A name with no valid date raises :class:`~unmix.errors.InputError` naming the file and
   suggesting ``dates``, and saying what is wrong with an impossible one ("2018-13-45 in
   scene_2018-13-45.tif is not a valid date: month 13"); two files on the same date raise one
   naming both files.

Values
------
Reflectance = stored value x scale + offset, as float32. The file's own GDAL scale/offset per
band is used when present; ``scale``/``offset`` arguments override it. The file's nodata value
becomes NaN before scaling, NaN stays NaN, and with a quality mask (``qa``) a pixel with any of
``qa_bits`` set (or, with no bits given, any non-zero QA value) becomes NaN in every band.
"""

from __future__ import annotations

from .dates import date_from_name, read_dates_csv
from .files import find_stack_files
from .open import Resampling, open_stack

__all__ = ["open_stack", "date_from_name", "read_dates_csv", "find_stack_files", "Resampling"]
