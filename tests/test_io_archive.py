"""Tests of unmix.io.archive: delivered Landsat Collection 2 Level-2 and Sentinel-2 Level-2A layouts.

Fixtures (tests/_archive_helpers.py) follow the published layouts (file names, MTL keys, QA_PIXEL
bits, SCL classes, scale and offset: USGS LSDS-1618/1619, ESA L2A PSD). References: the reflectance
the fixtures stored (quantised to the products' DN steps), numpy block means for area averaging, and
rasterio/GDAL reads of the same files.
"""

from __future__ import annotations

import numpy as np
import pytest
from _archive_helpers import (
    QA_CLOUD,
    SR_SCALE,
    smooth_reflectance,
    write_landsat_scene,
    write_s2_product,
)

from unmix.errors import InputError, StackReadError, UnknownNameError
from unmix.io.archive import find_scenes, grid_from_bounds, open_archive
from unmix.io.archive.quality import masked


def test_landsat_scene_values_scale_fill_and_qa(tmp_path):
    refl = smooth_reflectance((40, 50), seed=1)
    refl[:, 3, 4] = np.nan  # fill (DN 0)
    qa = np.full((40, 50), 21824, np.uint16)
    qa[10, 10] = QA_CLOUD  # cloud bit 3 (LSDS-1619 QA_PIXEL)
    qa[11, 12] = 21824 | (1 << 4)  # cloud shadow bit 4
    write_landsat_scene(tmp_path, refl, qa=qa)
    cube = open_archive(tmp_path).compute()
    assert cube.dims == ("time", "band", "y", "x") and cube.shape == (1, 6, 40, 50)
    assert list(cube["band"].values) == ["blue", "green", "red", "nir", "swir1", "swir2"]
    assert cube["sensor"].values.tolist() == ["landsat-8-oli"]
    v = cube.values[0]
    ok = np.isfinite(refl).all(axis=0)
    ok[10, 10] = ok[11, 12] = False
    assert np.isnan(v[:, ~ok]).all()
    # DN = (refl + 0.2) / 2.75e-5 rounded: the read-back differs by at most half a DN step
    np.testing.assert_allclose(v[:, ok], refl[:, ok], rtol=0, atol=SR_SCALE / 2 + 1e-6)


def test_tar_file_reads_like_the_extracted_folder(tmp_path):
    refl = smooth_reflectance((30, 30), seed=2)
    write_landsat_scene(tmp_path / "folder", refl)
    write_landsat_scene(tmp_path / "tar", refl, tar=True)
    a = open_archive(tmp_path / "folder").compute()
    b = open_archive(tmp_path / "tar").compute()
    np.testing.assert_array_equal(a.values, b.values)
    assert all(p.startswith("/vsitar/") for p in b.attrs["input_files"])


def test_tm_and_oli_dates_stack_by_role(tmp_path):
    # TM band 3 and OLI band 4 are both red (USGS band designations): the same reflectance on both dates
    refl = smooth_reflectance((20, 20), seed=3)
    write_landsat_scene(tmp_path, refl, sensor="LT05", date="19990610")
    write_landsat_scene(tmp_path, refl, sensor="LC08", date="20200610")
    cube = open_archive(tmp_path).compute()
    assert cube["sensor"].values.tolist() == ["landsat-5-tm", "landsat-8-oli"]
    np.testing.assert_array_equal(cube.values[0], cube.values[1])
    assert [str(t)[:10] for t in cube["time"].values] == ["1999-06-10", "2020-06-10"]


def test_sentinel2_10_and_20_m_bands_area_averaged_onto_30_m(tmp_path):
    refl10 = smooth_reflectance((60, 60), seed=4)  # 10 m, so 20 x 20 pixels of 30 m
    write_s2_product(tmp_path, refl10)
    grid = grid_from_bounds("EPSG:32612", 30.0, (500000.0, 3600000.0 - 600.0, 500000.0 + 600.0, 3600000.0))
    cube = open_archive(tmp_path, grid=grid).compute()
    assert cube.shape == (1, 6, 20, 20) and cube["sensor"].values.tolist() == ["sentinel-2a-msi"]
    v = cube.values[0]
    # reference: the area average over each 30 m cell, computed with numpy on a 10 m raster: the 3 x 3
    # block mean of the 10 m bands, and of the 20 m bands (2 x 2 means as written) repeated onto 10 m
    # (each 30 m cell covers 1.5 x 1.5 pixels of 20 m). DN steps of 1e-4 bound the difference.
    blocks = refl10.reshape(6, 20, 3, 20, 3).mean(axis=(2, 4))
    np.testing.assert_allclose(v[:3], blocks[:3], rtol=0, atol=1e-4)  # 10 m bands
    r20 = np.round(refl10[3:].reshape(3, 30, 2, 30, 2).mean(axis=(2, 4)) * 10000) / 10000
    area = np.kron(r20, np.ones((1, 2, 2))).reshape(3, 20, 3, 20, 3).mean(axis=(2, 4))
    np.testing.assert_allclose(v[3:], area, rtol=0, atol=1e-5)  # 20 m bands
    assert "baseline" in str(find_scenes(tmp_path)[0].processing)


def test_sentinel2_offset_before_and_after_baseline_04(tmp_path):
    # from processing baseline 04.00 on, reflectance = (DN - 1000) / 10000; before it, DN / 10000 (ESA L2A PSD)
    refl10 = smooth_reflectance((30, 30), seed=5)
    write_s2_product(tmp_path / "new", refl10, baseline="0400", offset=-1000, driver="GTiff")
    write_s2_product(tmp_path / "old", refl10, baseline="0301", offset=0, driver="GTiff")
    new, old = find_scenes(tmp_path / "new")[0], find_scenes(tmp_path / "old")[0]
    assert new.offset["B4"] == pytest.approx(-0.1) and old.offset["B4"] == 0.0
    a = open_archive(tmp_path / "new").compute().values
    b = open_archive(tmp_path / "old").compute().values
    np.testing.assert_allclose(a, b, atol=1e-6)


@pytest.mark.parametrize("share, expected", [(0.0, 4), (0.5, 1)])
def test_scl_mask_at_the_set_share(tmp_path, share, expected):
    # one cloudy 20 m SCL pixel (class 9, L2A PSD) at rows/cols 20-40 m: on the 30 m grid it covers
    # 4/9 and 2/9 and 2/9 and 1/9 of four cells; "any" masks the four, a share of 0.5 masks ... one cell
    # fully covered? none: the 2 x 2 block below makes one cell fully cloudy
    refl10 = smooth_reflectance((60, 60), seed=6)
    scl = np.full((30, 30), 4, np.uint8)
    scl[3:5, 3:5] = 9  # 40-80 m: covers 30 m cells 1..2 fully (30-90 m) partly; cell (2,2) = 60-90 m, 3/4 ... see below
    write_s2_product(tmp_path, refl10, scl20=scl, driver="GTiff")
    grid = grid_from_bounds("EPSG:32612", 30.0, (500000.0, 3600000.0 - 600.0, 500000.0 + 600.0, 3600000.0))
    cube = open_archive(tmp_path, grid=grid, mask_share=share).compute()
    nan = np.isnan(cube.values[0, 0])
    # reference: the share of each 30 m cell covered by the cloudy 20 m pixels, computed on a 10 m raster
    cloud10 = np.kron(scl == 9, np.ones((2, 2))).astype(float)
    cover = cloud10.reshape(20, 3, 20, 3).mean(axis=(1, 3))
    want = cover > share if share > 0 else cover > 0
    np.testing.assert_array_equal(nan, want)
    assert want.sum() == expected


def test_two_scenes_of_one_date_are_mosaicked_on_the_grid(tmp_path):
    # adjacent path/rows of one day: the left scene covers columns 0-29, the right one 20-49 (overlap)
    refl = smooth_reflectance((20, 50), seed=7)
    write_landsat_scene(tmp_path, refl[:, :, :30], path_row="038037")
    write_landsat_scene(tmp_path, refl[:, :, 20:], path_row="039037", origin=(500000.0 + 600.0, 3600000.0))
    grid = grid_from_bounds("EPSG:32612", 30.0, (500000.0, 3600000.0 - 600.0, 500000.0 + 1500.0, 3600000.0))
    cube = open_archive(tmp_path, grid=grid).compute()
    assert cube.sizes["time"] == 1 and " + " in str(cube["product"].values[0])
    np.testing.assert_allclose(cube.values[0], refl, atol=SR_SCALE / 2 + 1e-6)


def test_bad_inputs_name_product_band_or_key(tmp_path):
    refl = smooth_reflectance((10, 10), seed=8)
    write_landsat_scene(tmp_path / "a", refl, skip=("B4",))
    with pytest.raises(StackReadError, match=r"LC08_L2SP_038037_20200815_20200919_02_T1: band file .*SR_B4"):
        find_scenes(tmp_path / "a")
    write_landsat_scene(tmp_path / "b", refl, skip=("MTL",))
    with pytest.raises(StackReadError, match="metadata file .*MTL.txt.* is missing"):
        find_scenes(tmp_path / "b")
    write_landsat_scene(tmp_path / "c", refl, skip=("QA",))
    with pytest.raises(StackReadError, match="QA_PIXEL.TIF is missing"):
        find_scenes(tmp_path / "c")
    write_landsat_scene(tmp_path / "d", refl, collection="01")
    with pytest.raises(StackReadError, match="Collection 01"):
        find_scenes(tmp_path / "d")
    write_landsat_scene(tmp_path / "e", refl, sensor="LT04")
    with pytest.raises(UnknownNameError, match="no measured spectral response"):
        find_scenes(tmp_path / "e")
    bad = tmp_path / "f" / "LC08_L2SP_03803_20200815_x_02_T1_SR_B4.TIF"
    bad.parent.mkdir()
    bad.write_bytes(b"II*\x00")
    with pytest.raises(StackReadError, match="cannot be parsed"):
        find_scenes(tmp_path / "f")
    write_s2_product(tmp_path / "g", smooth_reflectance((20, 20)), skip=("MTD",), driver="GTiff")
    with pytest.raises(StackReadError, match="MTD_MSIL2A.xml is missing"):
        find_scenes(tmp_path / "g")
    write_s2_product(tmp_path / "h", smooth_reflectance((20, 20)), skip=("SCL",), driver="GTiff")
    with pytest.raises(StackReadError, match="SCL"):
        find_scenes(tmp_path / "h")
    with pytest.raises(InputError, match="degrees"):
        grid_from_bounds("EPSG:4326", 30.0, (10.0, 40.0, 11.0, 41.0))


def test_quality_band_of_the_wrong_size_and_unreadable_jpeg2000(tmp_path):
    refl = smooth_reflectance((20, 20), seed=9)
    folder = write_landsat_scene(tmp_path / "a", refl)
    qa_path = next(folder.glob("*_QA_PIXEL.TIF"))
    import rasterio
    from affine import Affine

    with rasterio.open(qa_path, "w", driver="GTiff", width=10, height=10, count=1, dtype="uint16", crs="EPSG:32612",
                       transform=Affine(30, 0, 500000, 0, -30, 3600000)) as dst:
        dst.write(np.zeros((1, 10, 10), np.uint16))
    with pytest.raises(StackReadError, match="QA_PIXEL.*10 x 10.*20 x 20"):
        open_archive(tmp_path / "a")
    safe = write_s2_product(tmp_path / "b", smooth_reflectance((20, 20)))
    broken = next(safe.rglob("*_B04_10m.jp2"))
    broken.write_bytes(b"\x00\x00\x00\x0cjP  " + b"\x00" * 64)
    with pytest.raises(StackReadError, match="B04_10m.jp2"):
        open_archive(tmp_path / "b").compute()


def test_quality_decoding_examples():
    # QA_PIXEL 21824 = clear (bits 6, 8, 10, 12, 14); 22280 = cloud; 1 = fill (LSDS-1619 examples, from memory)
    assert masked("landsat-qa-pixel", np.array([21824, 22280, 1]), ("fill", "cloud")).tolist() == [False, True, True]
    assert masked("sentinel-2-scl", np.arange(12), ("cloud_high", "snow")).nonzero()[0].tolist() == [9, 11]


def test_record_switching_sensor_unmixed_with_each_sensors_endmembers(tmp_path):
    # No real change: the same cover fractions observed by TM, OLI and MSI. Each date's reflectance is
    # mixed from the shipped (invented) library resampled with that sensor's measured responses; unmixing
    # each date with its own sensor's endmembers gives back the fractions, the OLI endmembers for every
    # date do not (the pseudo-change the per-sensor path removes).
    from unmix.cube import unmix_cube
    from unmix.io.library import read_shipped_library
    from unmix.sensors.roles import bands_for_roles
    from unmix.spectra import resample

    lib = read_shipped_library("demo_library").select(["green_vegetation", "bright_soil", "shade"])
    rng = np.random.default_rng(10)
    # constant over 60 m blocks, so that no 20 m Sentinel-2 pixel straddles two covers
    frac = np.kron(rng.dirichlet(np.ones(3), size=(15, 15)), np.ones((2, 2, 1)))  # (y, x, endmember)
    spectra = {s: resample(lib, s, bands_for_roles(s)).spectra for s in ("landsat-5-tm", "landsat-8-oli",
                                                                            "sentinel-2a-msi")}
    refl = {s: np.moveaxis(frac @ m, -1, 0) for s, m in spectra.items()}
    write_landsat_scene(tmp_path, refl["landsat-5-tm"], sensor="LT05", date="19950704")
    write_landsat_scene(tmp_path, refl["landsat-8-oli"], sensor="LC08", date="20150704")
    write_s2_product(tmp_path, np.kron(refl["sentinel-2a-msi"], np.ones((1, 3, 3))), date="20220704",
                     driver="GTiff")
    cube = open_archive(tmp_path)
    assert cube["sensor"].values.tolist() == ["landsat-5-tm", "landsat-8-oli", "sentinel-2a-msi"]
    ds = unmix_cube(cube, spectra, names=lib.names).compute()
    truth = np.moveaxis(frac, -1, 0)
    for t in range(3):
        # DN quantisation (2.75e-5, 1e-4 reflectance) and 20 m bands averaged from 10 m bound the error
        np.testing.assert_allclose(ds["fractions"].values[t], truth, atol=2e-3)
    assert ds["valid_count"].values.min() == 3
    assert ds["endmember_spectra"].dims == ("sensor_id", "endmember", "band")
    one = unmix_cube(cube, spectra["landsat-8-oli"], names=lib.names).compute()
    assert np.abs(one["fractions"].values[0] - truth).max() > 0.01  # TM dates with OLI endmembers: biased


def test_stac_item_collection_loads_like_the_folder(tmp_path):
    # STAC 1.x ItemCollection written with pystac; each item's assets are the delivered files
    import datetime

    import pystac

    refl = smooth_reflectance((20, 20), seed=11)
    folders = [write_landsat_scene(tmp_path / "files", refl, date="20200815"),
               write_landsat_scene(tmp_path / "files", refl * 0.9, date="20210815")]
    items = []
    for k, folder in enumerate(folders):
        item = pystac.Item(id=f"scene-{k}", geometry=None, bbox=None,
                           datetime=datetime.datetime(2020 + k, 8, 15), properties={})
        for f in sorted(folder.iterdir()):
            item.add_asset(f.name.split("_")[-1].split(".")[0].lower(), pystac.Asset(href=str(f)))
        items.append(item)
    path = tmp_path / "items.json"
    pystac.ItemCollection(items).save_object(dest_href=str(path))
    a = open_archive(path).compute()
    b = open_archive(tmp_path / "files").compute()
    np.testing.assert_array_equal(a.values, b.values)
    assert a.sizes["time"] == 2


def test_stac_item_without_the_needed_assets_is_named(tmp_path):
    import datetime

    import pystac

    refl = smooth_reflectance((10, 10), seed=12)
    folder = write_landsat_scene(tmp_path / "files", refl)
    item = pystac.Item(id="incomplete-scene", geometry=None, bbox=None, datetime=datetime.datetime(2020, 8, 15),
                       properties={})
    for f in sorted(folder.iterdir()):
        if "_SR_B5" not in f.name:  # the near-infrared band of OLI left out
            item.add_asset(f.name, pystac.Asset(href=str(f)))
    path = tmp_path / "item.json"
    item.save_object(dest_href=str(path), include_self_link=False)
    with pytest.raises(StackReadError, match=r"STAC item incomplete-scene .*SR_B5"):
        find_scenes(path)
    empty = pystac.Item(id="no-assets", geometry=None, bbox=None, datetime=datetime.datetime(2020, 8, 15),
                        properties={})
    path2 = tmp_path / "empty.json"
    empty.save_object(dest_href=str(path2), include_self_link=False)
    with pytest.raises(StackReadError, match="STAC item no-assets .* has no Landsat"):
        find_scenes(path2)


def test_scene_off_the_grid_is_warped_like_gdal(tmp_path):
    # two scenes of one day on different grids: the second lies half a pixel off the first one's grid and
    # is warped onto it (not refused). Reference: rasterio.warp.reproject (GDAL) of the same file, nearest.
    import rasterio
    from rasterio.warp import Resampling, reproject

    refl = smooth_reflectance((20, 20), seed=13)
    write_landsat_scene(tmp_path, refl, path_row="038037")
    other = write_landsat_scene(tmp_path, refl[:, :, ::-1].copy(), path_row="039037",
                                origin=(500000.0 + 615.0, 3600000.0))  # 20.5 pixels to the east
    grid = grid_from_bounds("EPSG:32612", 30.0, (500000.0, 3600000.0 - 600.0, 500000.0 + 1200.0, 3600000.0))
    cube = open_archive(tmp_path, grid=grid).compute()
    v = cube.values[0]
    np.testing.assert_allclose(v[:, :, :20], refl, atol=SR_SCALE / 2 + 1e-6)  # first scene, on the grid
    with rasterio.open(next(other.glob("*_SR_B4.TIF"))) as src:  # red
        ref = np.zeros((20, 40), np.float32)
        reproject(src.read(1).astype(np.float32), ref, src_transform=src.transform, src_crs=src.crs,
                  dst_transform=rasterio.Affine(*grid.transform), dst_crs=src.crs, resampling=Resampling.nearest,
                  src_nodata=0, dst_nodata=0)
    right = ref[:, 21:] > 0  # columns the second scene covers fully
    np.testing.assert_allclose(v[2, :, 21:][right], (ref[:, 21:] * SR_SCALE - 0.2)[right], atol=1e-6)


def test_threaded_and_process_cluster_give_the_same_cube(tmp_path):
    # the per-date readers travel to dask.distributed worker processes (pickled) and read the same values
    import distributed

    refl = smooth_reflectance((30, 30), seed=14)
    write_landsat_scene(tmp_path, refl, date="20200815")
    write_s2_product(tmp_path, np.kron(refl, np.ones((1, 3, 3))), date="20210815", driver="GTiff")
    cube = open_archive(tmp_path, chunks=16)
    threaded = cube.data.compute(scheduler="threads")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster, \
            distributed.Client(cluster) as client:
        clustered = client.compute(cube.data).result()
    np.testing.assert_array_equal(clustered, threaded)
    assert np.isfinite(threaded).all()


def test_band_file_rewritten_after_opening_is_an_error(tmp_path):
    # the version of every plain file is recorded when the archive is opened (size, mtime, inode) and
    # checked at each read: a rewrite in between stops the read with one line naming the file
    import os

    refl = smooth_reflectance((20, 20), seed=15)
    folder = write_landsat_scene(tmp_path, refl)
    cube = open_archive(tmp_path)
    band = next(folder.glob("*_SR_B4.TIF"))
    data = band.read_bytes()
    band.unlink()
    band.write_bytes(data)  # same bytes, a new file (new inode)
    os.utime(band, ns=(1, 1))
    with pytest.raises(StackReadError, match=r"SR_B4.TIF was modified after the stack was opened"):
        cube.compute()
