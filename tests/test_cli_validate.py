"""Tests of ``unmix validate``: fractions of a product against reference fractions at points.

Outside references: xarray reading the fractions product (the pixel values a point must take),
numpy formulas of MAE / RMSE / bias and scipy.stats.linregress for R^2, pyproj for lon/lat, and the
PNG signature of the figure file.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from pyproj import Transformer
from scipy.stats import linregress

from unmix.cli.main import main
from unmix.io.products import write_netcdf

UTM33 = 'PROJCS["WGS 84 / UTM zone 33N",GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563]],PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433]],PROJECTION["Transverse_Mercator"],PARAMETER["latitude_of_origin",0],PARAMETER["central_meridian",15],PARAMETER["scale_factor",0.9996],PARAMETER["false_easting",500000],PARAMETER["false_northing",0],UNIT["metre",1],AUTHORITY["EPSG","32633"]]'
EMS = ["gv", "soil"]


@pytest.fixture(scope="module")
def fractions_nc(tmp_path_factory):
    rng = np.random.default_rng(4)
    time = pd.to_datetime(["2020-06-01", "2021-06-03", "2022-06-05"])
    gv = rng.uniform(0, 1, (3, 20, 25)).astype(np.float32)
    f = np.stack([gv, 1 - gv], axis=1)
    ds = xr.Dataset({"fractions": (("time", "endmember", "y", "x"), f, {"units": "1"})},
                    coords={"time": time, "endmember": EMS, "y": 4100000.0 - 30.0 * (np.arange(20) + 0.5),
                            "x": 500000.0 + 30.0 * (np.arange(25) + 0.5)}, attrs={"crs_wkt": UTM33})
    return write_netcdf(ds, tmp_path_factory.mktemp("fr") / "fractions.nc")


def _points(fractions_nc, n=40, seed=1):
    """Reference points inside pixels (off their centres), dates a few days from a product date."""
    rng = np.random.default_rng(seed)
    with xr.open_dataset(fractions_nc) as ds:  # xarray as the outside reader
        rows, cols, t = rng.integers(0, 20, n), rng.integers(0, 25, n), rng.integers(0, 3, n)
        x = ds["x"].values[cols] + rng.uniform(-14, 14, n)
        y = ds["y"].values[rows] + rng.uniform(-14, 14, n)
        truth = ds["fractions"].values[t, :, rows, cols].astype(float)
        dates = pd.to_datetime(ds["time"].values[t]) + pd.to_timedelta(rng.integers(-5, 6, n), unit="D")
    reference = np.clip(truth + rng.normal(0.03, 0.08, truth.shape), 0, 1)
    table = pd.DataFrame({"x": x, "y": y, "date": dates.strftime("%Y-%m-%d"), "gv": reference[:, 0],
                          "soil": reference[:, 1], "plot": [f"P{i}" for i in range(n)]})
    return table, truth, reference


def test_validate_against_numpy_and_scipy(tmp_path, fractions_nc, capsys):
    table, truth, reference = _points(fractions_nc)
    table.to_csv(tmp_path / "points.csv", index=False)
    code = main(["validate", str(fractions_nc), str(tmp_path / "points.csv"), "--out", str(tmp_path / "v")])
    out, err = capsys.readouterr()
    assert code == 0, err
    assert "unmix validate: wrote" in out and "RMSE" in out
    agreement = pd.read_csv(tmp_path / "v" / "fraction_agreement.csv", index_col="endmember")
    pairs = pd.read_csv(tmp_path / "v" / "fraction_points.csv")
    np.testing.assert_allclose(pairs[["gv_estimated", "soil_estimated"]], truth, rtol=1e-6)  # float32 product
    for j, name in enumerate(EMS):
        d = truth[:, j] - reference[:, j]
        # formulas: Willmott & Matsuura (2005); R^2 from scipy.stats.linregress
        assert agreement.loc[name, "mae"] == pytest.approx(np.abs(d).mean(), rel=1e-5)
        assert agreement.loc[name, "rmse"] == pytest.approx(np.sqrt((d ** 2).mean()), rel=1e-5)
        assert agreement.loc[name, "bias"] == pytest.approx(d.mean(), rel=1e-4, abs=1e-6)
        assert agreement.loc[name, "r2"] == pytest.approx(linregress(reference[:, j], truth[:, j]).rvalue ** 2, rel=1e-5)
    assert (tmp_path / "v" / "fraction_agreement.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_validate_lon_lat_points_and_one_date(tmp_path, fractions_nc, capsys):
    table, truth, _ = _points(fractions_nc, n=10)
    with xr.open_dataset(fractions_nc) as ds:
        truth = ds["fractions"].sel(time="2021-06-03").values  # all points on the second date
    lon, lat = Transformer.from_crs(32633, 4326, always_xy=True).transform(table["x"].values, table["y"].values)
    lonlat = pd.DataFrame({"lon": lon, "lat": lat, "soil": 0.5})
    lonlat.to_csv(tmp_path / "p.csv", index=False)
    code = main(["validate", str(fractions_nc), str(tmp_path / "p.csv"), "--date", "2021-06-01",
                 "--out", str(tmp_path / "v")])
    _, err = capsys.readouterr()
    assert code == 0, err
    pairs = pd.read_csv(tmp_path / "v" / "fraction_points.csv")
    rows = np.floor((4100000.0 - table["y"].values) / 30).astype(int)
    cols = np.floor((table["x"].values - 500000.0) / 30).astype(int)
    np.testing.assert_allclose(pairs["soil_estimated"], truth[1, rows, cols], rtol=1e-6)
    assert "gv_estimated" not in pairs  # endmembers without reference columns are not compared


@pytest.mark.parametrize("edit, words", [
    (lambda t: t.assign(x=t["x"] + 1e5), "outside the fractions grid"),
    (lambda t: t.assign(date="2019-01-01"), "more than 16 days"),
    (lambda t: t.assign(gv=1.5), "outside 0..1"),
    (lambda t: t.drop(columns=["gv", "soil"]), "no column named after an endmember"),
    (lambda t: t.assign(date="June"), "not a date"),
    (lambda t: t.drop(columns=["date"]), "holds 3 dates"),
])
def test_bad_points_give_one_line_and_exit_2(tmp_path, fractions_nc, capsys, edit, words):
    table, _, _ = _points(fractions_nc, n=5)
    edit(table).to_csv(tmp_path / "p.csv", index=False)
    code = main(["validate", str(fractions_nc), str(tmp_path / "p.csv"), "--out", str(tmp_path / "v")])
    _, err = capsys.readouterr()
    lines = [line for line in err.splitlines() if line.strip()]
    assert code == 2 and len(lines) == 1 and lines[0].startswith("unmix: error:"), err
    assert words in lines[0]
    assert not (tmp_path / "v" / "fraction_agreement.csv").exists()
