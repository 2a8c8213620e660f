"""Tests of the ``unmix fractions`` command: products, scheduling modes, and every bad input.

Numbers are checked against the fractions the fixture mixed the pixels with (conftest.py); the
products are read back with rasterio and netCDF4.
"""

from __future__ import annotations

import os

import netCDF4
import numpy as np
import pytest
import rasterio
from affine import Affine
from conftest import BANDS, ENDMEMBERS, NODATA

from unmix.cli.main import main
from unmix.io.products import open_product


def run(args, capsys):
    code = main(["fractions", *map(str, args)])
    out, err = capsys.readouterr()
    return code, out, err


def base_args(info, library, out):
    return [info.folder, "--library", library, "--sensor", "landsat-8-oli", "--band-names", ",".join(BANDS),
            "--scale", "0.0001", "--out", out]


def assert_clean_failure(code, err, out_dir, *patterns):
    assert code == 2
    lines = [ln for ln in err.strip().splitlines() if ln]
    assert len(lines) == 1 and lines[0].startswith("unmix: error:"), err
    assert "Traceback" not in err
    for pattern in patterns:
        assert pattern in lines[0], (pattern, lines[0])
    assert not (out_dir / "fractions.nc").exists()
    if out_dir.exists():
        assert [p.name for p in out_dir.iterdir() if p.name.startswith(".")] == []  # no temp files


def test_writes_product_and_summary(make_stack, make_library, tmp_path, capsys):
    info = make_stack()
    code, out, err = run(base_args(info, make_library(), tmp_path / "out"), capsys)
    assert code == 0, err
    assert "480 pixels x 4 dates x 3 endmembers" in out and "mean rmse" in out and "valid" in out
    product = open_product(tmp_path / "out" / "fractions.nc")
    f = product["fractions"].values
    ok = np.broadcast_to(~info.nodata_mask[:, None], f.shape)
    np.testing.assert_allclose(f[ok], info.fractions[ok], atol=3e-3)  # mixing fractions of the fixture
    assert np.isnan(f[~ok]).all()
    np.testing.assert_array_equal(product["valid_count"].values, (~info.nodata_mask).sum(axis=0))
    with netCDF4.Dataset(tmp_path / "out" / "fractions.nc") as nc:
        assert nc.command.startswith("unmix fractions ")
        assert "--scale 0.0001" in nc.command
        assert nc.endmember_names == ", ".join(ENDMEMBERS)
        assert "caution" in nc.ncattrs()


def test_cog_and_endmember_selection(make_stack, make_library, tmp_path, capsys):
    info = make_stack()
    args = base_args(info, make_library(), tmp_path / "out") + ["--cog", "--endmembers", "green_vegetation,shade",
                                                                "--constraint", "sum-to-one"]
    code, out, err = run(args, capsys)
    assert code == 0, err
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == [
        "dates.csv", "fractions.nc", "fractions_green_vegetation.tif", "fractions_shade.tif"]
    with rasterio.open(tmp_path / "out" / "fractions_shade.tif") as src:
        assert src.descriptions == tuple(str(d) for d in info.dates)
        assert src.crs == rasterio.crs.CRS.from_user_input(info.crs)
        assert src.transform.almost_equals(info.transform)
        np.testing.assert_array_equal(
            src.read(), open_product(tmp_path / "out" / "fractions.nc")["fractions"].sel(endmember="shade").values)


def test_qa_band_masks_pixels(make_stack, make_library, tmp_path, capsys):
    info = make_stack(qa="band", descriptions=True)
    args = [info.folder, "--library", make_library(), "--sensor", "landsat-8-oli", "--scale", "0.0001",
            "--qa", "QA_PIXEL", "--qa-bits", "3,1", "--out", tmp_path / "out"]
    code, out, err = run(args, capsys)
    assert code == 0, err
    f = open_product(tmp_path / "out" / "fractions.nc")["fractions"].values
    assert np.isnan(f[:, :, 0, 0]).all() and np.isnan(f[2, :, 10, 10]).all()
    assert np.isfinite(f[3, :, 11, 11]).all()


def test_workers_give_the_same_product_as_threads(make_stack, make_library, tmp_path, capsys):
    info = make_stack()
    lib = make_library()
    code, out, err = run(base_args(info, lib, tmp_path / "threads") + ["--chunk-size", "16"], capsys)
    assert code == 0, err
    code, out, err = run(base_args(info, lib, tmp_path / "cluster") + ["--chunk-size", "16", "--workers", "2"], capsys)
    assert code == 0, err
    assert "local cluster of 2 processes" in out
    a = open_product(tmp_path / "threads" / "fractions.nc")
    b = open_product(tmp_path / "cluster" / "fractions.nc")
    for name in ("fractions", "rmse", "valid_count"):
        np.testing.assert_array_equal(a[name].values, b[name].values)


def test_scheduler_address_gives_the_same_product(make_stack, make_library, tmp_path, capsys):
    import distributed

    info = make_stack()
    lib = make_library()
    code, out, err = run(base_args(info, lib, tmp_path / "threads"), capsys)
    assert code == 0, err
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=":0") as cluster:
        code, out, err = run(base_args(info, lib, tmp_path / "remote") + ["--scheduler", cluster.scheduler_address],
                             capsys)
    assert code == 0, err
    assert f"cluster at {cluster.scheduler_address}" in out
    a = open_product(tmp_path / "threads" / "fractions.nc")["fractions"].values
    b = open_product(tmp_path / "remote" / "fractions.nc")["fractions"].values
    np.testing.assert_array_equal(a, b)


# ------------------------------------------------------------------------------------------------
# bad input: one line, exit 2, no traceback, no product


@pytest.mark.parametrize("kind", ["crs", "shift"])
def test_date_on_another_grid(make_stack, make_library, write_geotiff, tmp_path, capsys, kind):
    info = make_stack()
    h, w = info.reflectance.shape[2:]
    data = np.full((len(BANDS), h, w), 1000, np.int16)
    if kind == "crs":
        write_geotiff(info.folder / "scene_2021-01-01.tif", data, crs="EPSG:32634", transform=info.transform,
                      nodata=NODATA)
        expect = "CRS"
    else:
        write_geotiff(info.folder / "scene_2021-01-01.tif", data, nodata=NODATA,
                      transform=Affine(30.0, 0.0, 500010.0, 0.0, -30.0, 4100000.0))
        expect = "transform"
    out_dir = tmp_path / "out"
    code, out, err = run(base_args(info, make_library(), out_dir), capsys)
    assert_clean_failure(code, err, out_dir, "scene_2021-01-01.tif", expect, "--align")
    # --align warps it instead; the warped date is a flat image (no ground texture), so its shift cannot be
    # measured: it is flagged by name, never passed as measured
    from unmix.errors import ComparabilityWarning

    with pytest.warns(ComparabilityWarning, match="2021-01-01"):
        code, out, err = run(base_args(info, make_library(), out_dir) + ["--align"], capsys)
    assert code == 0, err


def test_truncated_geotiff(make_stack, make_library, tmp_path, capsys):
    info = make_stack()
    data = info.files[2].read_bytes()
    info.files[2].write_bytes(data[: len(data) * 2 // 3])
    code, out, err = run(base_args(info, make_library(), tmp_path / "out"), capsys)
    assert_clean_failure(code, err, tmp_path / "out", info.files[2].name)


def test_band_count_mismatch(make_stack, make_library, tmp_path, capsys):
    info = make_stack()
    args = base_args(info, make_library(), tmp_path / "out")
    args[args.index("--band-names") + 1] = "B2,B3,B4,B5"
    code, out, err = run(args, capsys)
    assert_clean_failure(code, err, tmp_path / "out", "4 band names", info.files[0].name, "6")


def test_unknown_endmember_lists_available(make_stack, make_library, tmp_path, capsys):
    info = make_stack()
    args = base_args(info, make_library(), tmp_path / "out") + ["--endmembers", "green_vegetation,lichen"]
    code, out, err = run(args, capsys)
    assert_clean_failure(code, err, tmp_path / "out", "lichen", "bright_soil", "shade")


def test_unknown_sensor_lists_known(make_stack, make_library, tmp_path, capsys):
    info = make_stack()
    args = base_args(info, make_library(), tmp_path / "out")
    args[args.index("--sensor") + 1] = "landsat-42"
    code, out, err = run(args, capsys)
    assert_clean_failure(code, err, tmp_path / "out", "landsat-42", "landsat-8-oli", "sentinel-2a-msi")


def test_non_numeric_library_row_names_the_line(make_stack, make_library, tmp_path, capsys):
    info = make_stack()
    rows = [f"{c},{b},0.1,0.2,0.01" for b, c in zip(BANDS, (482.5, 562.5, 655.0, 865.0, 1610.0, 2200.0))]
    rows[3] = "865.0,B5,0.45,abc,0.01"
    lib = make_library(rows=rows)
    code, out, err = run(base_args(info, lib, tmp_path / "out"), capsys)
    assert_clean_failure(code, err, tmp_path / "out", "line 5", "abc")


def test_unsorted_library_rows_name_the_line(make_stack, tmp_path, capsys):
    info = make_stack()
    lib = tmp_path / "full.csv"
    wl = np.arange(400.0, 2501.0, 10.0)
    lines = ["wavelength_nm,a,b"] + [f"{w},{0.1 + 1e-4 * i},{0.3}" for i, w in enumerate(wl)]
    lines[11], lines[12] = lines[12], lines[11]  # 510 before 500: lines 12 and 13 of the file
    lib.write_text("\n".join(lines) + "\n")
    code, out, err = run(base_args(info, lib, tmp_path / "out"), capsys)
    assert_clean_failure(code, err, tmp_path / "out", "line 13")


def test_empty_stack_folder(make_library, tmp_path, capsys):
    (tmp_path / "empty").mkdir()
    args = [tmp_path / "empty", "--library", make_library(), "--sensor", "landsat-8-oli", "--out", tmp_path / "out"]
    code, out, err = run(args, capsys)
    assert_clean_failure(code, err, tmp_path / "out", "no GeoTIFFs", "empty")


def test_existing_output_untouched_and_checked_before_any_work(make_stack, make_library, tmp_path, capsys):
    info = make_stack()
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    existing = out_dir / "fractions.nc"
    existing.write_bytes(b"an earlier product")
    stamp = os.stat(existing).st_mtime_ns
    args = base_args(info, make_library(), out_dir)
    args[0] = tmp_path / "no_such_stack"  # would fail later: the overwrite check must come first
    code = main(["fractions", *map(str, args)])
    err = capsys.readouterr().err
    assert code == 2 and "exists" in err and "--overwrite" in err and "Traceback" not in err
    assert existing.read_bytes() == b"an earlier product" and os.stat(existing).st_mtime_ns == stamp
    code, out, err = run(base_args(info, make_library(), out_dir) + ["--overwrite"], capsys)
    assert code == 0, err
    assert existing.read_bytes() != b"an earlier product"


def test_missing_library_file(make_stack, tmp_path, capsys):
    info = make_stack()
    code, out, err = run(base_args(info, tmp_path / "nope.csv", tmp_path / "out"), capsys)
    assert_clean_failure(code, err, tmp_path / "out", "nope.csv")


def test_more_endmembers_than_bands_can_separate(make_stack, tmp_path, capsys):
    info = make_stack()
    rng = np.random.default_rng(5)
    names = [f"e{i}" for i in range(8)]  # 8 endmembers > 6 bands + the sum-to-one row
    lib = tmp_path / "many.csv"
    lines = ["wavelength_nm,band," + ",".join(names)]
    for b, c in zip(BANDS, (482.5, 562.5, 655.0, 865.0, 1610.0, 2200.0)):
        lines.append(f"{c},{b}," + ",".join(f"{v:.4f}" for v in rng.uniform(0.05, 0.6, len(names))))
    lib.write_text("\n".join(lines) + "\n")
    code, out, err = run(base_args(info, lib, tmp_path / "out"), capsys)
    assert_clean_failure(code, err, tmp_path / "out", "8 endmembers", "6 bands")


def _bundle_library(tmp_path):
    """ENDMEMBERS plus a decoy green member, with class labels in the sidecar (unmix.io.library format)."""
    from conftest import BAND_CENTRES_NM

    spectra = dict(ENDMEMBERS)
    spectra["green_vegetation_decoy"] = (0.07, 0.11, 0.09, 0.30, 0.31, 0.22)
    classes = {"green_vegetation": "green_vegetation", "green_vegetation_decoy": "green_vegetation",
               "bright_soil": "soil", "shade": "shade"}
    lines = [",".join(["wavelength_nm", "band", *spectra])]
    for b, (band, centre) in enumerate(zip(BANDS, BAND_CENTRES_NM)):
        lines.append(",".join([f"{centre}", band, *(f"{v[b]}" for v in spectra.values())]))
    path = tmp_path / "bundles.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    import json

    (tmp_path / "bundles.json").write_text(json.dumps(
        {"sensor": "landsat-8-oli", "spectra": {n: {"class": c} for n, c in classes.items()}}), encoding="utf-8")
    return path


def test_mesma_uses_class_bundles_and_writes_members(make_stack, tmp_path, capsys):
    import json

    info = make_stack()
    library = _bundle_library(tmp_path)
    code, out, err = run([*base_args(info, library, tmp_path / "out"), "--mesma"], capsys)
    assert code == 0, err
    assert "MESMA" in out
    product = open_product(tmp_path / "out" / "fractions.nc")
    assert list(product["endmember"].values) == ["green_vegetation", "soil", "shade"]
    members = product["members"].sel({"class": "green_vegetation"}).values
    names = json.loads(product["members"].attrs["member_names"])
    assert names["green_vegetation"] == ["green_vegetation", "green_vegetation_decoy"]
    # Pixels mixed from all three true spectra with at least 20 % each: MESMA (Roberts et al. 1998) must
    # pick the true green member, not the decoy, and recover the mixing fractions of the fixture.
    truth = info.fractions  # (time, endmember, y, x) in ENDMEMBERS order: green, soil, shade
    strong = (truth >= 0.2).all(axis=1) & ~info.nodata_mask
    assert strong.sum() > 20
    assert (members[strong] == 0).all()
    f = product["fractions"].values
    np.testing.assert_allclose(np.moveaxis(f, 1, -1)[strong], np.moveaxis(truth, 1, -1)[strong], atol=5e-3)


def test_mesma_refuses_an_unbounded_constraint(make_stack, tmp_path, capsys):
    info = make_stack()
    library = _bundle_library(tmp_path)
    out_dir = tmp_path / "out"
    code, out, err = run([*base_args(info, library, out_dir), "--mesma", "--constraint", "none"], capsys)
    assert_clean_failure(code, err, out_dir, "--mesma", "fcls")


def test_netcdf_cube_input_with_cog(make_netcdf_stack, make_library, tmp_path, capsys):
    # reference: the fractions the fixture mixed (outside the package) and the NetCDF product itself
    info = make_netcdf_stack()
    out = tmp_path / "out"
    args = [info.files[0], "--library", make_library(), "--sensor", "landsat-8-oli", "--out", out, "--cog"]
    code, _, err = run(args, capsys)
    assert code == 0, err
    product = open_product(out / "fractions.nc")
    got = product["fractions"].sel(endmember=list(info.names)).values
    truth = info.fractions
    finite = np.isfinite(got)
    assert not finite[0, :, 2, 3].any()  # the NaN pixel of the cube stays no data
    np.testing.assert_allclose(got[finite], truth[finite], atol=2e-3)
    with rasterio.open(out / f"fractions_{info.names[0]}.tif") as src:
        assert src.crs == rasterio.crs.CRS.from_user_input(info.crs)
        np.testing.assert_array_equal(src.read(), product["fractions"].sel(endmember=info.names[0]).values)
    product.close()


def test_implausible_reflectance_is_masked_with_a_warning_naming_date_and_count(make_stack, make_library, tmp_path,
                                                                                capsys):
    # a float32 stack whose second date carries an undeclared fill value (1e30) in 3 pixels
    from unmix.errors import ImplausibleReflectanceWarning

    info = make_stack(storage="float32")
    with rasterio.open(info.files[1], "r+") as dst:
        band = dst.read(2)
        band[4, 4:7] = 1e30
        dst.write(band, 2)
    args = [info.folder, "--library", make_library(), "--sensor", "landsat-8-oli", "--band-names", ",".join(BANDS),
            "--out", tmp_path / "out"]
    with pytest.warns(ImplausibleReflectanceWarning, match=rf"{str(info.dates[1])}: 3 pixels"):
        code, out, err = run(args, capsys)
    assert code == 0, err
    product = open_product(tmp_path / "out" / "fractions.nc")
    assert np.isnan(product["fractions"].values[1, :, 4, 4:7]).all()
    assert product["implausible_count"].values.tolist() == [0, 3] + [0] * (len(info.dates) - 2)
    # the same run with the screening off keeps those pixels, on the simplex
    code, out, err = run(args[:-1] + [tmp_path / "off", "--valid-range", "none"], capsys)
    assert code == 0, err
    f = open_product(tmp_path / "off" / "fractions.nc")["fractions"].values[1, :, 4, 4:7]
    assert np.isfinite(f).all() and (f >= 0).all() and (f <= 1).all()


@pytest.mark.parametrize("bad", ["2", "a,b", "2,-0.5", "1,2,3"])
def test_bad_valid_range_is_one_line(make_stack, make_library, tmp_path, capsys, bad):
    info = make_stack()
    code, out, err = run(base_args(info, make_library(), tmp_path / "out") + ["--valid-range", bad], capsys)
    assert_clean_failure(code, err, tmp_path / "out", "--valid-range" if bad != "2,-0.5" else "low < high")
