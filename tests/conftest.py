"""Shared fixtures: tiny GeoTIFF / NetCDF time stacks and spectral libraries written into tmp_path.

The stacks are linear mixtures of three invented endmember spectra (``ENDMEMBERS``) in six
Landsat-8-OLI-named bands (``BANDS``) with known per-pixel fractions, so a test can compare what the
package reads and computes with values made here, outside the package.

Fixtures
--------
``make_stack(**options) -> StackInfo``
    Write a stack of GeoTIFFs (one per date) and return its folder, files, dates, the float
    reflectance that was meant to be stored, the true fractions and the grid.
``make_netcdf_stack(**options) -> StackInfo``
    The same data as one NetCDF cube (time, band, y, x) with a CF grid mapping.
``write_geotiff(path, data, **options)``
    Write one GeoTIFF with rasterio (a helper for tests that need odd files).
``make_library(names=None, resampled=True) -> Path``
    A library CSV of ``ENDMEMBERS`` in the documented format (resampled: a ``band`` column).

Helpers
-------
``spy_chunk_reads(cube) -> (spied cube, list of chunk shapes read)``
    A dask-backed cube whose every chunk computation is recorded, to count what a function reads.
"""

from __future__ import annotations

import datetime as dt
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
from hypothesis import settings

# Property tests draw the same examples on every run (CI must not turn red by chance); set
# HYPOTHESIS_PROFILE=explore for fresh random examples when hunting for bugs locally.
settings.register_profile("ci", derandomize=True, database=None)
settings.register_profile("explore")
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))

#: Band names the fixture files hold (Landsat 8 OLI B2-B7).
BANDS = ("B2", "B3", "B4", "B5", "B6", "B7")
#: Invented endmember reflectance per band (well separated: no collinearity warnings).
ENDMEMBERS = {
    "green_vegetation": (0.04, 0.08, 0.05, 0.45, 0.25, 0.12),
    "bright_soil": (0.12, 0.16, 0.22, 0.28, 0.38, 0.34),
    "shade": (0.01, 0.01, 0.01, 0.01, 0.01, 0.01),
}
#: Band centres [nm] of BANDS (approximate OLI centres; only used as library wavelengths).
BAND_CENTRES_NM = (482.5, 562.5, 655.0, 865.0, 1610.0, 2200.0)
DEFAULT_DATES = ("2019-03-01", "2019-07-15", "2020-03-01", "2020-07-15")
CRS = "EPSG:32633"
NODATA = -9999


def spy_chunk_reads(cube):
    """The dask-backed ``cube`` with every computed chunk recorded: (spied cube, list of the chunks' shapes)."""
    calls = []

    def spy(block):
        if block.size:  # not dask's call on an empty block to learn the output type
            calls.append(block.shape)
        return block

    return cube.copy(data=cube.data.map_blocks(spy, dtype=cube.dtype)), calls


@dataclass
class StackInfo:
    folder: Path
    files: list[Path]
    dates: list[np.datetime64]
    reflectance: np.ndarray  # (time, band, y, x) float32, NaN where a band was written as nodata
    fractions: np.ndarray  # (time, endmember, y, x) float32 truth
    endmembers: np.ndarray  # (endmember, band) float64
    names: tuple[str, ...]
    band_names: tuple[str, ...]
    crs: str
    transform: object
    nodata_mask: np.ndarray  # (time, y, x) bool: pixels written as nodata in some band
    extra: dict = field(default_factory=dict)


def _name_for(date: str, style: str, i: int) -> str:
    d = dt.date.fromisoformat(date)
    if style == "iso":
        return f"scene_{d.isoformat()}.tif"
    if style == "compact":
        return f"LC08_L2SP_038037_{d:%Y%m%d}_20211231_02_T1.tif"
    if style == "doy":
        return f"mosaic_{d.year}{d.timetuple().tm_yday:03d}.tif"
    if style == "none":
        return f"scene_{chr(ord('a') + i)}.tif"
    raise ValueError(style)


def _write_geotiff(path, data, *, crs=CRS, transform=None, nodata=None, dtype=None, scales=None, offsets=None,
                   descriptions=None, blocksize=16, tiled=True, compress="deflate"):
    import rasterio
    from affine import Affine

    data = np.asarray(data)
    if data.ndim == 2:
        data = data[None]
    count, height, width = data.shape
    transform = transform or Affine(30.0, 0.0, 500000.0, 0.0, -30.0, 4100000.0)
    profile = dict(driver="GTiff", width=width, height=height, count=count, dtype=dtype or data.dtype.name,
                   crs=crs, transform=transform, nodata=nodata, compress=compress)
    if tiled:
        profile.update(tiled=True, blockxsize=blocksize, blockysize=blocksize)
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(data.astype(profile["dtype"]))
        if scales is not None:
            dst.scales = tuple(scales)
        if offsets is not None:
            dst.offsets = tuple(offsets)
        if descriptions is not None:
            for i, d in enumerate(descriptions, start=1):
                dst.set_band_description(i, d)
    return Path(path)


@pytest.fixture
def write_geotiff():
    """``write_geotiff(path, data, **options)``: write one GeoTIFF (see ``_write_geotiff``)."""
    return _write_geotiff


def _synthetic(n_dates, height, width, seed):
    # One ground seen on every date (as in a real record: the date checks of `unmix fractions` compare dates),
    # each date's cover moved a fifth of the way towards its own random mixture; still on the simplex.
    rng = np.random.default_rng(seed)
    M = np.array(list(ENDMEMBERS.values()), dtype=np.float64)
    ground = rng.dirichlet(np.ones(len(M)), size=(1, height, width))
    frac = 0.8 * ground + 0.2 * rng.dirichlet(np.ones(len(M)), size=(n_dates, height, width))  # (t, y, x, p)
    refl = frac @ M  # (t, y, x, b)
    return M, frac, refl


@pytest.fixture
def make_stack(tmp_path):
    """Write a GeoTIFF stack; options: dates, height, width, storage ("int16" scaled 1e-4 or "float32"),
    name_style ("iso", "compact", "doy", "none"), gdal_scale (store scale/offset metadata), descriptions,
    qa ("band" -> a QA band after the reflectance bands, "files" -> a folder of QA files, None),
    nodata (write a few nodata pixels), folder name, seed, blocksize."""

    def factory(*, dates=DEFAULT_DATES, height=24, width=20, storage="int16", name_style="iso",
                gdal_scale=False, descriptions=False, qa=None, nodata=True, folder="stack", seed=0,
                blocksize=16):
        from affine import Affine

        root = tmp_path / folder
        root.mkdir(parents=True, exist_ok=True)
        M, frac, refl = _synthetic(len(dates), height, width, seed)
        transform = Affine(30.0, 0.0, 500000.0, 0.0, -30.0, 4100000.0)
        nodata_mask = np.zeros((len(dates), height, width), bool)
        if nodata:
            nodata_mask[0, 2, 3] = True  # whole pixel nodata on the first date
            if len(dates) > 1:
                nodata_mask[1, 5, 7] = True  # one band nodata on the second date
        qa_arrays = np.zeros((len(dates), height, width), np.uint16)
        qa_arrays[:, 0, 0] = 1 << 3  # "cloud" bit 3 on every date
        if len(dates) > 3:
            qa_arrays[2, 10, 10] = 1 << 1  # bit 1 on one date
            qa_arrays[3, 11, 11] = 1 << 5  # a bit nobody asks for
        files = []
        stored_refl = np.empty((len(dates), len(BANDS), height, width), np.float32)
        qa_folder = root.parent / f"{folder}_qa"
        for i, date in enumerate(dates):
            cube = np.moveaxis(refl[i], -1, 0)  # (b, y, x)
            kwargs = {}
            if storage == "int16":
                stored = np.round(cube * 10000).astype(np.int16)
                values = stored.astype(np.float32) * np.float32(1e-4)
                if nodata:
                    if i == 0:
                        stored[:, 2, 3] = NODATA
                    if i == 1:
                        stored[4, 5, 7] = NODATA
                kwargs.update(nodata=NODATA, dtype="int16")
                if gdal_scale:
                    kwargs.update(scales=[1e-4] * len(BANDS), offsets=[0.0] * len(BANDS))
            else:
                stored = cube.astype(np.float32)
                values = stored.copy()
                if nodata:
                    if i == 0:
                        stored[:, 2, 3] = np.nan
                    if i == 1:
                        stored[4, 5, 7] = np.nan
                kwargs.update(nodata=float("nan"), dtype="float32")
            if nodata and i == 0:
                values[:, 2, 3] = np.nan
            if nodata and i == 1:
                values[4, 5, 7] = np.nan
            stored_refl[i] = values
            data = stored
            desc = list(BANDS) if descriptions else None
            if qa == "band":
                data = np.concatenate([stored, qa_arrays[i][None].astype(stored.dtype)], axis=0)
                desc = (desc + ["QA_PIXEL"]) if desc else None
                if kwargs.get("scales"):
                    kwargs["scales"] = kwargs["scales"] + [1.0]
                    kwargs["offsets"] = kwargs["offsets"] + [0.0]
            path = root / _name_for(date, name_style, i)
            _write_geotiff(path, data, transform=transform, descriptions=desc, blocksize=blocksize, **kwargs)
            files.append(path)
            if qa == "files":
                qa_folder.mkdir(exist_ok=True)
                _write_geotiff(qa_folder / f"qa_{date}.tif", qa_arrays[i], transform=transform, dtype="uint16",
                               blocksize=blocksize)
        dates64 = [np.datetime64(d, "D") for d in dates]
        info = StackInfo(
            folder=root, files=files, dates=dates64, reflectance=stored_refl,
            fractions=np.moveaxis(frac, -1, 1).astype(np.float32), endmembers=M, names=tuple(ENDMEMBERS),
            band_names=BANDS, crs=CRS, transform=transform, nodata_mask=nodata_mask,
            extra={"qa": qa_arrays, "qa_folder": qa_folder if qa == "files" else None},
        )
        return info

    return factory


@pytest.fixture
def make_netcdf_stack(tmp_path):
    """Write the float stack as one NetCDF cube (time, band, y, x), CF grid mapping by hand."""

    def factory(*, dates=DEFAULT_DATES, height=24, width=20, seed=0, name="cube.nc"):
        import rasterio.crs
        import xarray as xr
        from affine import Affine

        M, frac, refl = _synthetic(len(dates), height, width, seed)
        transform = Affine(30.0, 0.0, 500000.0, 0.0, -30.0, 4100000.0)
        data = np.moveaxis(refl, -1, 1).astype(np.float32)
        data[0, :, 2, 3] = np.nan
        x = transform.c + transform.a * (np.arange(width) + 0.5)
        y = transform.f + transform.e * (np.arange(height) + 0.5)
        wkt = rasterio.crs.CRS.from_user_input(CRS).to_wkt()
        gt = f"{transform.c} {transform.a} 0.0 {transform.f} 0.0 {transform.e}"
        ds = xr.Dataset(
            {"reflectance": (("time", "band", "y", "x"), data, {"grid_mapping": "spatial_ref", "units": "1"})},
            coords={
                "time": np.array(dates, dtype="datetime64[ns]"),
                "band": list(BANDS),
                "y": y,
                "x": x,
                "spatial_ref": ((), 0, {"crs_wkt": wkt, "spatial_ref": wkt, "GeoTransform": gt}),
            },
        )
        ds = ds.isel(time=slice(None, None, -1))  # stored newest first, so the reader must sort
        path = tmp_path / name
        ds.to_netcdf(path, encoding={"reflectance": {"zlib": True, "chunksizes": (1, len(BANDS), 8, 8)}})
        return StackInfo(
            folder=tmp_path, files=[path], dates=[np.datetime64(d, "D") for d in dates],
            reflectance=data, fractions=np.moveaxis(frac, -1, 1).astype(np.float32), endmembers=M,
            names=tuple(ENDMEMBERS), band_names=BANDS, crs=CRS, transform=transform,
            nodata_mask=np.isnan(data).any(axis=1),
        )

    return factory


@pytest.fixture
def make_library(tmp_path):
    """Write ENDMEMBERS as a library CSV; resampled=True adds the ``band`` column (format of unmix.io.library)."""

    def factory(names=None, *, resampled=True, filename="library.csv", rows=None):
        names = list(names or ENDMEMBERS)
        path = tmp_path / filename
        lines = []
        if resampled:
            lines.append(",".join(["wavelength_nm", "band", *names]))
            for b, (band, centre) in enumerate(zip(BANDS, BAND_CENTRES_NM)):
                lines.append(",".join([f"{centre}", band, *(f"{ENDMEMBERS[n][b]}" for n in names)]))
        else:
            lines.append(",".join(["wavelength_nm", *names]))
        if rows is not None:
            lines = [lines[0], *rows]
        path.write_text("\n".join(lines) + "\n", encoding="utf-8")
        return path

    return factory
