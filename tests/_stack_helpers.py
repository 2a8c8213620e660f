"""Shared helpers of the stack fault and fuzz tests: small GeoTIFFs, tag surgery, GDAL's reference values.

Tag entries are located with tifffile (``TiffTag.offset`` is where the entry's 12-byte, or BigTIFF
20-byte, record starts: code, type, count, value or offset; TIFF 6.0 section 2).
"""

from __future__ import annotations

import math
import struct

import numpy as np
import rasterio
from affine import Affine

CRS = "EPSG:32612"
TRANSFORM = Affine(30.0, 0.0, 400000.0, 0.0, -30.0, 3500000.0)


def write_tif(path, data, *, nodata=None, **options):
    """Write (band, y, x) ``data`` as a GeoTIFF with GDAL's GTiff driver (options as rasterio takes them)."""
    nb, height, width = data.shape
    with rasterio.open(path, "w", driver="GTiff", width=width, height=height, count=nb, dtype=str(data.dtype),
                       crs=CRS, transform=TRANSFORM, nodata=nodata, **options) as dst:
        dst.write(data)
    return path


def tag_entries(path):
    """{tag code: (entry offset [bytes], bigtiff)} of the first directory, located with tifffile."""
    import tifffile

    with tifffile.TiffFile(path) as tif:
        return {tag.code: (tag.offset, tif.is_bigtiff) for tag in tif.pages.first.tags.values()}, tif.is_bigtiff


def patch_tag(path, code, *, new_code=None, field_type=None, count=None, value=None):
    """Overwrite fields of the directory entry of tag ``code`` in place (value: raw bytes of the value field)."""
    entries, big = tag_entries(path)
    offset = entries[code][0]
    with open(path, "r+b") as fh:
        if new_code is not None:
            fh.seek(offset)
            fh.write(struct.pack("<H", new_code))
        if field_type is not None:
            fh.seek(offset + 2)
            fh.write(struct.pack("<H", field_type))
        if count is not None:
            fh.seek(offset + 4)
            fh.write(struct.pack("<Q" if big else "<I", count))
        if value is not None:
            fh.seek(offset + (12 if big else 8))
            fh.write(value)


def gdal_decoded(path, band_indexes=None):
    """GDAL's (rasterio's) read of the whole file, decoded as ``open_stack`` decodes: (band, y, x) float32.

    float32(stored) * float32(scale) + float32(offset) with the file's own scale/offset (1 and 0 when
    absent), NaN where stored == nodata; the reference every direct read must equal bit for bit.
    """
    with rasterio.open(path) as src:
        indexes = list(band_indexes or range(1, src.count + 1))
        raw = src.read(indexes)
        scales = [src.scales[i - 1] for i in indexes]
        offsets = [src.offsets[i - 1] for i in indexes]
        nodata = [src.nodatavals[i - 1] for i in indexes]
    out = np.empty(raw.shape, np.float32)
    for k in range(len(indexes)):
        s = 1.0 if scales[k] is None or not math.isfinite(scales[k]) else scales[k]
        o = 0.0 if offsets[k] is None or not math.isfinite(offsets[k]) else offsets[k]
        out[k] = raw[k].astype(np.float32) * np.float32(s) + np.float32(o)
        nd = nodata[k]
        if nd is not None and not (isinstance(nd, float) and math.isnan(nd)):
            out[k][raw[k].astype(np.float64) == float(nd)] = np.nan  # compared in float64, as the decoder does
    return out
