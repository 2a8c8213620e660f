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
