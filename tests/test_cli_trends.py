"""Tests of the ``unmix trends`` command: product written and readable, bad input gives exit 2 and one line.

Numbers are checked in tests/test_cube_trends.py; here the command's contract: the file, its
variables and attributes as read back by xarray (an outside reader), and the error behaviour.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from unmix.cli.main import main
from unmix.io.products import write_netcdf

EMS = ["green_vegetation", "sand"]


@pytest.fixture
def fractions_nc(tmp_path):
    """A small fractions product (time, endmember, y, x) written with the project's writer."""
    rng = np.random.default_rng(11)
    n_dates, ny, nx = 24, 6, 5
    time = pd.date_range("2016-01-01", periods=n_dates, freq="QS")
    f = (0.4 + rng.normal(0, 0.015, (n_dates, 2, ny, nx))).astype(np.float32)
    f[:, 0, :3] -= (0.04 * np.arange(n_dates) / 4)[:, None, None].astype(np.float32)  # gv declines, rows 0-2
    f[12:, 1, 3:, :2] += 0.25  # sand steps up at date 12, rows 3-5, cols 0-1
    f[:, :, 5, 4] = np.nan  # no data
    ds = xr.Dataset(
        {
            "fractions": (("time", "endmember", "y", "x"), f, {"units": "1"}),
            "rmse": (("time", "y", "x"), np.zeros((n_dates, ny, nx), np.float32)),
            "valid_count": (("y", "x"), np.full((ny, nx), n_dates, np.int16)),
        },
        coords={
            "time": time,
            "endmember": EMS,
            "y": 4100000.0 - 30.0 * (np.arange(ny) + 0.5),
            "x": 500000.0 + 30.0 * (np.arange(nx) + 0.5),
        },
        attrs={"crs_wkt": 'PROJCS["WGS 84 / UTM zone 33N",GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563]],PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433]],PROJECTION["Transverse_Mercator"],PARAMETER["latitude_of_origin",0],PARAMETER["central_meridian",15],PARAMETER["scale_factor",0.9996],PARAMETER["false_easting",500000],PARAMETER["false_northing",0],UNIT["metre",1],AUTHORITY["EPSG","32633"]]'},
    )
    return write_netcdf(ds, tmp_path / "fractions.nc")


@pytest.fixture
def rules_txt(tmp_path):
    p = tmp_path / "rules.txt"
    p.write_text(
        "# test rules\n"
        "greening_loss = green_vegetation:decrease\n"
        "sand_encroachment = sand:increase & !green_vegetation:increase\n",
        encoding="utf-8",
    )
    return p


def _one_line_error(capsys, code):
    out, err = capsys.readouterr()
    assert code == 2
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("unmix: error:"), err
    return lines[0]


def test_trends_writes_a_readable_product(tmp_path, fractions_nc, rules_txt, capsys):
    out_dir = tmp_path / "out"
    code = main([
        "trends", str(fractions_nc), "--out", str(out_dir), "--rules", str(rules_txt),
        "--correction", "hamed-rao", "--min-valid", "8",
    ])
    stdout, _ = capsys.readouterr()
    assert code == 0, stdout
    assert stdout.splitlines()[0].startswith(f"unmix trends: wrote {out_dir / 'trends.nc'}")
    assert "gradual_decrease" in stdout and "sand_encroachment" in stdout and "area [ha]" in stdout
    with xr.open_dataset(out_dir / "trends.nc") as ds:  # xarray as the outside reader
        for name in ("trajectory", "slope", "slope_low", "slope_high", "intercept", "tau", "p_value",
                     "q_value", "change_date", "change_p", "step", "greening_loss", "sand_encroachment",
                     "rule_area"):
            assert name in ds, name
        assert ds["trajectory"].dims == ("endmember", "y", "x")
        assert ds["trajectory"].attrs["flag_meanings"].split() == [
            "stable", "gradual_increase", "gradual_decrease", "abrupt_increase", "abrupt_decrease",
            "insufficient_data",
        ]
        assert ds["slope"].attrs["units"] == "1/yr"
        assert ds["change_date"].dtype.kind == "M"  # decoded as real dates
        assert ds["trajectory"].attrs.get("grid_mapping") == "spatial_ref"
        assert "unmix_version" in ds.attrs and "unmix trends" in ds.attrs["command"]
        tr = ds["trajectory"].values
        assert (tr[0, :3, :4] == 2).mean() >= 0.9  # declining rows (fixture truth)
        assert (tr[1, 3:5, :2] == 3).all()  # the sand step (fixture truth)
        assert (tr[:, 5, 4] == 5).all()  # no-data pixel
        # change date: first date after the break = 13th quarterly date from 2016-01-01 = 2019-01-01
        assert (ds["change_date"].values[1, 3:5, :2] == np.datetime64("2019-01-01")).all()
        # 30 m pixels: the rule area is pixels x 0.09 ha
        n = int((ds["sand_encroachment"].values == 1).sum())
        assert float(ds["rule_area"].sel(rule="sand_encroachment")) == pytest.approx(n * 0.09, rel=1e-6)


def test_missing_input_exits_2(tmp_path, capsys):
    code = main(["trends", str(tmp_path / "nope.nc"), "--out", str(tmp_path / "o")])
    line = _one_line_error(capsys, code)
    assert "nope.nc" in line


def test_not_a_fractions_product_exits_2(tmp_path, capsys):
    other = tmp_path / "other.nc"
    xr.Dataset({"reflectance": (("y", "x"), np.zeros((3, 3), np.float32))},
               coords={"y": [2.5, 1.5, 0.5], "x": [0.5, 1.5, 2.5]}).to_netcdf(other)
    code = main(["trends", str(other), "--out", str(tmp_path / "o")])
    line = _one_line_error(capsys, code)
    assert "not a fractions product" in line
    text = tmp_path / "plain.nc"
    text.write_text("not netcdf at all")
    code = main(["trends", str(text), "--out", str(tmp_path / "o")])
    _one_line_error(capsys, code)


def test_existing_output_is_left_untouched(tmp_path, fractions_nc, capsys):
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    target = out_dir / "trends.nc"
    target.write_bytes(b"old product")
    code = main(["trends", str(fractions_nc), "--out", str(out_dir)])
    line = _one_line_error(capsys, code)
    assert "--overwrite" in line
    assert target.read_bytes() == b"old product"
    assert sorted(p.name for p in out_dir.iterdir()) == ["trends.nc"]  # no temporary left behind
    code = main(["trends", str(fractions_nc), "--out", str(out_dir), "--overwrite"])
    capsys.readouterr()
    assert code == 0
    with xr.open_dataset(target) as ds:
        assert "trajectory" in ds


def test_bad_rules_file_exits_2(tmp_path, fractions_nc, capsys):
    bad = tmp_path / "bad.txt"
    bad.write_text("ok = sand:increase\nbroken = sand:increase | (green_vegetation:decrease\n", "utf-8")
    code = main(["trends", str(fractions_nc), "--out", str(tmp_path / "o"), "--rules", str(bad)])
    line = _one_line_error(capsys, code)
    assert "bad.txt, line 2, column 52" in line  # counted by hand: end of the line, ')' expected
    unknown = tmp_path / "unknown.txt"
    unknown.write_text("x = soil:increase\n", "utf-8")
    code = main(["trends", str(fractions_nc), "--out", str(tmp_path / "o"), "--rules", str(unknown)])
    line = _one_line_error(capsys, code)
    assert "available: green_vegetation, sand" in line
    code = main(["trends", str(fractions_nc), "--out", str(tmp_path / "o"), "--rules", str(tmp_path / "none.txt")])
    _one_line_error(capsys, code)
    assert not (tmp_path / "o" / "trends.nc").exists()


def test_claimed_output_stops_the_run_until_its_holder_is_gone(tmp_path, fractions_nc, capsys):
    import json
    import os
    import socket
    import subprocess
    import sys

    out_dir = tmp_path / "out"
    out_dir.mkdir()
    claim = out_dir / ".trends.nc.claim"
    # a run that is alive (our parent process, as the operating system sees it) holds the product
    claim.write_text(json.dumps({"host": socket.gethostname(), "pid": os.getppid(), "started": "2026-01-01T00:00:00Z"}))
    line = _one_line_error(capsys, main(["trends", str(fractions_nc), "--out", str(out_dir)]))
    assert "being written by another run" in line and f"pid {os.getppid()}" in line and str(claim) in line
    assert sorted(p.name for p in out_dir.iterdir()) == [".trends.nc.claim"]
    # the holder died (a process that has exited): the next run removes its claim and writes the product
    gone = subprocess.Popen([sys.executable, "-c", "pass"])
    gone.wait()
    claim.write_text(json.dumps({"host": socket.gethostname(), "pid": gone.pid, "started": "2026-01-01T00:00:00Z"}))
    assert main(["trends", str(fractions_nc), "--out", str(out_dir)]) == 0, capsys.readouterr().err
    assert sorted(p.name for p in out_dir.iterdir()) == ["trends.nc"]


# --------------------------------------------------------------------------------------------------
# --cog: the maps as GeoTIFFs, in the same product set as trends.nc


def _read_cog(path):
    import rasterio
    import tifffile

    with tifffile.TiffFile(path) as tif:  # tifffile as a second reader of the TIFF structure
        tiled = all(page.is_tiled for page in tif.pages)
    with rasterio.open(path) as src:
        return {"values": src.read(), "nodata": src.nodata, "descriptions": src.descriptions, "crs": src.crs,
                "transform": src.transform, "tags": src.tags(), "band_tags": [src.tags(b) for b in src.indexes],
                "units": src.units, "layout": src.tags(ns="IMAGE_STRUCTURE").get("LAYOUT"),
                "tiled": tiled,
                "dtypes": src.dtypes}


def test_cog_maps_equal_the_product(tmp_path, fractions_nc, rules_txt, capsys):
    from xml.etree import ElementTree

    import rasterio
    import rasterio.shutil

    from unmix.dates import decimal_years
    from unmix.report.palettes import RULE_COLOURS, TRAJECTORY_PALETTE

    out_dir = tmp_path / "out"
    code = main(["trends", str(fractions_nc), "--out", str(out_dir), "--rules", str(rules_txt), "--cog"])
    assert code == 0, capsys.readouterr().err
    rules = ["greening_loss", "sand_encroachment"]
    cats = ["trajectory.tif", *(f"rule_{r}.tif" for r in rules)]
    assert sorted(p.name for p in out_dir.iterdir()) == sorted(
        ["trends.nc", "slope.tif", "q_value.tif", "change_date.tif", *cats, *(c + ".aux.xml" for c in cats)])
    with xr.open_dataset(out_dir / "trends.nc", decode_coords="all") as ds:  # xarray as the outside reader
        crs = rasterio.crs.CRS.from_wkt(ds["spatial_ref"].attrs["crs_wkt"])
        gt = [float(v) for v in ds["spatial_ref"].attrs["GeoTransform"].split()]
        transform = rasterio.Affine.from_gdal(*gt)
        maps = {name: _read_cog(out_dir / name) for name in ("trajectory.tif", "slope.tif", "q_value.tif",
                                                              "change_date.tif", *cats[1:])}
        for name, m in maps.items():  # GDAL (rasterio) reads georeferencing, nodata and the COG layout marker
            assert m["crs"] == crs and m["transform"].almost_equals(transform), name
            assert m["layout"] == "COG" and m["tiled"], name
            assert "unmix trends" in m["tags"]["command"] and m["tags"]["unmix_version"], name
        for name in ("trajectory.tif", "slope.tif", "q_value.tif", "change_date.tif"):
            assert maps[name]["descriptions"] == tuple(EMS), name
            assert [t["endmember"] for t in maps[name]["band_tags"]] == EMS
        traj = maps["trajectory.tif"]
        assert traj["dtypes"] == ("uint8",) * 2 and traj["nodata"] == 255
        np.testing.assert_array_equal(traj["values"], ds["trajectory"].values)  # codes unchanged, no 255 written
        assert traj["tags"]["flag_values"] == "0 1 2 3 4 5"
        assert traj["tags"]["flag_meanings"] == ds["trajectory"].attrs["flag_meanings"]
        assert traj["band_tags"][1]["flag_meanings"] == ds["trajectory"].attrs["flag_meanings"]
        for name in ("slope", "q_value"):
            m = maps[f"{name}.tif"]
            assert m["dtypes"] == ("float32",) * 2 and np.isnan(m["nodata"])
            # NaN in trends.nc is NaN (= nodata) in the GeoTIFF, every other value is equal
            np.testing.assert_array_equal(m["values"], ds[name].values.astype(np.float32))
            assert np.isnan(m["values"][:, 5, 4]).all()
        assert maps["slope.tif"]["units"] == ("1/yr", "1/yr") and maps["slope.tif"]["tags"]["units"] == "1/yr"
        change = maps["change_date.tif"]
        dates = ds["change_date"].values
        assert (np.isnat(dates) == np.isnan(change["values"])).all()  # NaT <-> NaN (nodata)
        # decimal years (unmix.dates.decimal_years) stored as float32: 2019-01-01 -> 2019.0 (fixture truth)
        np.testing.assert_allclose(change["values"][~np.isnat(dates)], decimal_years(dates[~np.isnat(dates)]),
                                   rtol=0, atol=2.5e-4)  # float32 spacing at 2019 is 2**-12 (IEEE 754)
        assert (change["values"][1, 3:5, :2] == 2019.0).all()
        for rule in rules:
            m = maps[f"rule_{rule}.tif"]
            assert m["descriptions"] == (rule,) and m["nodata"] == 255 and m["dtypes"] == ("uint8",)
            np.testing.assert_array_equal(m["values"][0], ds[rule].values)
            assert m["tags"]["flag_values"] == "0 1 255"
            assert m["tags"]["flag_meanings"] == "false true insufficient_data"
    with rasterio.open(out_dir / "trajectory.tif") as src:  # band 1's colour table from the .aux.xml
        cmap = src.colormap(1)
        assert src.colorinterp[1] != rasterio.enums.ColorInterp.palette  # no half-paletted second band
    assert cmap[3] == tuple(int(TRAJECTORY_PALETTE["abrupt_increase"][i:i + 2], 16) for i in (1, 3, 5)) + (255,)
    with rasterio.open(out_dir / "rule_greening_loss.tif") as src:  # palette inside the TIFF, read by GDAL
        cmap = src.colormap(1)
    assert cmap[1] == tuple(int(RULE_COLOURS["true"][i:i + 2], 16) for i in (1, 3, 5)) + (255,)
    assert cmap[255][3] == 0  # nodata transparent
    # GDAL reads the category names of the .aux.xml beside each image: its own VRT copy writes them out
    for name, expected in (("trajectory.tif", FLAG_NAMES), ("rule_sand_encroachment.tif", ["false", "true"])):
        vrt = tmp_path / f"{name}.vrt"
        rasterio.shutil.copy(out_dir / name, vrt, driver="VRT")
        bands = ElementTree.parse(vrt).getroot().findall("VRTRasterBand")
        for band in bands:
            names = [c.text or "" for c in band.find("CategoryNames")]
            assert names[:len(expected)] == expected
        if name.startswith("rule"):
            assert names[255] == "insufficient_data"
            entries = bands[0].find("ColorTable").findall("Entry")
            assert entries[1].attrib["c1"] == str(int(RULE_COLOURS["true"][1:3], 16))
        else:
            assert len(bands) == 2


FLAG_NAMES = ["stable", "gradual_increase", "gradual_decrease", "abrupt_increase", "abrupt_decrease",
              "insufficient_data"]


def test_cog_maps_join_the_product_set(tmp_path, fractions_nc, rules_txt, capsys, monkeypatch):
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    (out_dir / "rule_greening_loss.tif").write_bytes(b"old map")
    # an existing map stops the run before any work, and trends.nc is not written either
    line = _one_line_error(capsys, main(["trends", str(fractions_nc), "--out", str(out_dir), "--rules",
                                         str(rules_txt), "--cog"]))
    assert "rule_greening_loss.tif" in line and "--overwrite" in line
    assert sorted(p.name for p in out_dir.iterdir()) == ["rule_greening_loss.tif"]
    # a failure while the GeoTIFFs are written leaves none of the set (trends.nc included)
    import unmix.io.products.trend_cogs as trend_cogs
    from unmix.errors import ProductWriteError

    real = trend_cogs.write_cog
    calls = []

    def failing(*args, **kwargs):
        calls.append(args[1])
        if len(calls) == 3:
            raise ProductWriteError(f"cannot write {args[1]}: no space left on device (simulated)")
        return real(*args, **kwargs)

    monkeypatch.setattr(trend_cogs, "write_cog", failing)
    code = main(["trends", str(fractions_nc), "--out", str(out_dir), "--rules", str(rules_txt), "--cog", "--overwrite"])
    assert "no space left" in _one_line_error(capsys, code) and len(calls) == 3
    assert sorted(p.name for p in out_dir.iterdir()) == ["rule_greening_loss.tif"]
    assert (out_dir / "rule_greening_loss.tif").read_bytes() == b"old map"
