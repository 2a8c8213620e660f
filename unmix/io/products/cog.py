"""Cloud-Optimized GeoTIFF products: one band per date or endmember, written atomically."""

from __future__ import annotations

import contextlib
import os
import sys
import tempfile
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ...cube.georef import georef_of
from ...errors import InputError
from .claim import ProductSet
from .provenance import _clean_attrs

__all__ = ["write_cog"]


def _cog_driver_available() -> bool:
    import rasterio

    with rasterio.Env() as env:
        return "COG" in env.drivers()


@contextlib.contextmanager
def _c_stderr_held() -> Iterator[None]:
    """Hold what C libraries print on file descriptor 2 while the block runs: shown afterwards if the
    block succeeds, dropped if it fails (the failure is raised as one exception instead).

    GDAL's bundled libtiff prints a failed write ("_tiffWriteProc: File too large.") straight to the
    descriptor, bypassing Python and GDAL's error handler, and GDAL does not raise for it.
    """
    try:
        sys.stderr.flush()
        held = tempfile.TemporaryFile()
        saved = os.dup(2)
        os.dup2(held.fileno(), 2)
    except (OSError, ValueError, AttributeError):  # no descriptor 2 or no room for the file: print as usual
        yield
        return
    failed = True
    try:
        yield
        failed = False
    finally:
        with contextlib.suppress(OSError, ValueError, AttributeError):
            sys.stderr.flush()
        os.dup2(saved, 2)
        os.close(saved)
        if not failed:
            held.seek(0)
            text = held.read()
            if text:
                os.write(2, text)
        held.close()


def _read_back(path: Path) -> None:
    """Read every block of a just-written GeoTIFF: GDAL may only log a failed write (a full disk, a
    file size limit) and leave a truncated file; reading it back raises instead."""
    import rasterio

    with rasterio.open(path) as src:
        for _, window in src.block_windows(1):
            src.read(window=window)


def write_cog(
    da: xr.DataArray,
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    blocksize: int = 512,
    compress: str = "DEFLATE",
    resampling: str = "average",
    tags: Mapping[str, Any] | None = None,
    products: ProductSet | None = None,
    dtype: str = "float32",
    nodata: float | None = float("nan"),
    descriptions: Sequence[str] | None = None,
    band_tags: Sequence[Mapping[str, Any]] | None = None,
    units: str | None = None,
    colormap: Mapping[int, tuple[int, int, int, int]] | None = None,
) -> Path:
    """Write a (time, y, x) or (y, x) array as a Cloud-Optimized GeoTIFF, atomically.

    The file is written under a hidden temporary name and appears complete or not at all (see
    :func:`~unmix.io.products.atomic_path`); a full disk or unwritable folder raises
    :class:`~unmix.errors.ProductWriteError`.

    One band per date, band descriptions = ISO dates (``YYYY-MM-DD``; for another leading
    dimension the coordinate values, or ``descriptions``), nodata NaN (or ``nodata``), tiled,
    compressed (with the floating-point or the horizontal-differencing predictor), with overviews. The array is
    computed block row by block row into a temporary tiled GeoTIFF, which GDAL's ``COG`` driver then
    copies into the final layout (or, on a GDAL without that driver, the tiled GeoTIFF gets internal
    overviews and is kept).

    Parameters
    ----------
    da : (time, y, x) or (y, x) xarray.DataArray
        Georeferenced by a ``spatial_ref`` coordinate or ``crs_wkt`` / ``transform`` attributes (or
        regular ``x``/``y`` coordinates, then without CRS).
    path : path
        Destination ``.tif``.
    overwrite : bool
        Replace an existing file (else :class:`~unmix.errors.OutputExistsError`, file untouched).
    blocksize : int
        Tile size [pixels].
    compress : str
        GDAL compression name.
    resampling : str
        Overview resampling (GDAL name); ``mode`` or ``nearest`` for categorical codes.
    tags : mapping, optional
        Dataset tags (provenance) to store in the file.
    products : ProductSet, optional
        A claimed set of products this file belongs to (:mod:`unmix.io.products.claim`); it appears
        with the rest of the set at its commit. Default: claimed and committed on its own.
    dtype : str
        Stored data type (``float32``, ``uint8``, ``int32``...); values are cast to it, so an integer
        type needs the caller to have put ``nodata`` where values are missing.
    nodata : float or None
        Nodata value stored in the file (NaN for floats by default).
    descriptions : sequence of str, optional
        Band descriptions, one per band (default: from the leading coordinate, see above).
    band_tags : sequence of mapping, optional
        Tags of each band (GDAL band metadata), one mapping per band.
    units : str, optional
        Unit of every band (GDAL's band unit type), e.g. ``1/yr``.
    colormap : mapping, optional
        Code -> (red, green, blue, alpha) 0..255: a colour table stored in the file. Only for a
        single ``uint8`` band: TIFF holds a palette for one-sample images only (GDAL makes a second
        band of a paletted file its alpha).

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np, xarray as xr
    >>> da = xr.DataArray(np.zeros((1, 4, 4), "float32"), dims=("time", "y", "x"),
    ...                   coords={"time": np.array(["2020-05-01"], "datetime64[ns]"),
    ...                           "y": [3.5, 2.5, 1.5, 0.5], "x": [0.5, 1.5, 2.5, 3.5]})
    >>> out = write_cog(da, pathlib.Path(tempfile.mkdtemp()) / "f.tif")
    """
    import rasterio
    import rasterio.shutil
    from affine import Affine
    from rasterio.enums import Resampling

    path = Path(path)
    if da.ndim == 2:
        da = da.expand_dims("band")
    if da.ndim != 3 or da.dims[1:] != ("y", "x"):
        raise InputError(f"write_cog needs dims (time, y, x) or (y, x), got {da.dims}; select one endmember first")
    lead = da.dims[0]
    if lead in da.coords:
        values = da[lead].values
        if np.issubdtype(values.dtype, np.datetime64):
            names = [str(np.datetime_as_string(v, unit="D")) for v in values]
        else:
            names = [str(v) for v in values]
    else:
        names = [f"{lead} {i + 1}" for i in range(da.shape[0])]
    if descriptions is not None:
        names = [str(d) for d in descriptions]
    wkt, transform = georef_of(da)
    n, height, width = (int(s) for s in da.shape)
    floating = np.issubdtype(np.dtype(dtype), np.floating)
    if len(names) != n or (band_tags is not None and len(band_tags) != n):
        raise InputError(f"write_cog: {n} bands but {len(names)} descriptions / "
                         f"{len(band_tags or names)} band tag sets for {path.name}")
    if colormap is not None and (n != 1 or np.dtype(dtype) != np.uint8):
        raise InputError(f"write_cog: a colour table needs one uint8 band ({path.name} has {n} {dtype} bands)")
    profile = {
        "driver": "GTiff",
        "width": width,
        "height": height,
        "count": n,
        "dtype": dtype,
        "nodata": nodata,
        "tiled": True,
        "blockxsize": blocksize,
        "blockysize": blocksize,
        "compress": compress,
        "predictor": 3 if floating else 2,
        "BIGTIFF": "IF_SAFER",
    }
    if wkt is not None:
        profile["crs"] = rasterio.crs.CRS.from_wkt(wkt)
    if transform is not None:
        profile["transform"] = Affine(*transform)
    clean_tags = {k: str(v) for k, v in _clean_attrs(dict(tags or {})).items()}
    use_cog = _cog_driver_available()

    with contextlib.ExitStack() as stack:
        if products is None:
            products = stack.enter_context(ProductSet([path], overwrite=overwrite))
        tmp = stack.enter_context(products.writing(path))
        stack.enter_context(_c_stderr_held())
        stage = products.scratch(path, "stage") if use_cog else tmp
        with rasterio.open(stage, "w", **profile) as dst:
            for i, text in enumerate(names, start=1):
                dst.set_band_description(i, text)
                if units is not None:
                    dst.set_band_unit(i, units)
                if band_tags is not None and band_tags[i - 1]:
                    dst.update_tags(i, **{k: str(v) for k, v in band_tags[i - 1].items()})
            if clean_tags:
                dst.update_tags(**clean_tags)
            if colormap is not None:
                dst.write_colormap(1, dict(colormap))
            step = blocksize * max(1, 2048 // blocksize)
            for row in range(0, height, step):
                rows = slice(row, min(height, row + step))
                block = np.asarray(da[:, rows, :].values).astype(dtype, copy=False)
                dst.write(block, window=rasterio.windows.Window(0, row, width, block.shape[1]))
            if not use_cog:
                factors = [f for f in (2, 4, 8, 16, 32) if min(height, width) // f >= blocksize // 2]
                if factors:
                    dst.build_overviews(factors, getattr(Resampling, resampling))
        if use_cog:
            rasterio.shutil.copy(
                stage,
                tmp,
                driver="COG",
                BLOCKSIZE=blocksize,
                COMPRESS=compress,
                PREDICTOR="YES",
                OVERVIEWS="AUTO",
                RESAMPLING=resampling.upper(),
                BIGTIFF="IF_SAFER",
            )
            with contextlib.suppress(OSError):  # the set removes it at the end anyway; free the space now
                Path(stage).unlink()
        _read_back(tmp)
    return path
