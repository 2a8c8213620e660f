"""``unmix trends --zones / --cover-change``: per-zone tables in the product and as CSV, checked against
numpy counts of the written maps; bad zone input gives one line and exit 2."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pyproj
import pytest
import xarray as xr

from unmix.cli.main import main
from unmix.io.products import write_netcdf

EMS = ["green_vegetation", "sand"]
UTM33 = pyproj.CRS.from_epsg(32633).to_wkt()
X0, Y0, RES = 500000.0, 4100000.0, 30.0


@pytest.fixture
def fractions_nc(tmp_path):
    rng = np.random.default_rng(7)
    n_dates, ny, nx = 24, 10, 12
    time = pd.date_range("2016-01-01", periods=n_dates, freq="QS")  # 2016 .. 2021
    f = (0.5 + rng.normal(0, 0.02, (n_dates, 2, ny, nx))).astype(np.float32)
    f[:, 0, :, :6] += 0.2  # west: green dominant
    f[12:, 0, :5, :6] -= 0.5  # north-west: green lost after 3 years
    f[:, 1] = 1.0 - f[:, 0]
    f[:, :, 9, 11] = np.nan
    ds = xr.Dataset({"fractions": (("time", "endmember", "y", "x"), f, {"units": "1"})}, coords={
        "time": time, "endmember": EMS, "y": Y0 - RES * (np.arange(ny) + 0.5), "x": X0 + RES * (np.arange(nx) + 0.5)},
        attrs={"crs_wkt": UTM33})
    return write_netcdf(ds, tmp_path / "fractions.nc")


@pytest.fixture
def zones_geojson(tmp_path):
    """Two zones drawn in UTM and written in WGS 84 longitude / latitude (RFC 7946)."""
    to_ll = pyproj.Transformer.from_crs(32633, 4326, always_xy=True)

    def ring(x0, y0, x1, y1):
        xs = np.r_[np.linspace(x0, x1, 20), np.full(20, x1), np.linspace(x1, x0, 20), np.full(20, x0)]
        ys = np.r_[np.full(20, y0), np.linspace(y0, y1, 20), np.full(20, y1), np.linspace(y1, y0, 20)]
        lon, lat = to_ll.transform(xs, ys)
        return [list(map(list, zip(lon, lat))) + [[lon[0], lat[0]]]]

    # west: columns 0-5, rows 0-9; east: columns 6-8, rows 0-4
    zones = [("west", (X0, Y0 - 300, X0 + 180, Y0)), ("east", (X0 + 180, Y0 - 150, X0 + 270, Y0))]
    doc = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"district": n}, "geometry": {"type": "Polygon", "coordinates": ring(*b)}}
        for n, b in zones]}
    p = tmp_path / "zones.geojson"
    p.write_text(json.dumps(doc), encoding="utf-8")
    return p


def test_trends_with_zones_and_cover_change(tmp_path, fractions_nc, zones_geojson, capsys):
    rules = tmp_path / "rules.txt"
    rules.write_text("loss = green_vegetation:decrease\nclass green = green_vegetation >= 0.6\n", encoding="utf-8")
    out = tmp_path / "out"
    code = main(["trends", str(fractions_nc), "--out", str(out), "--rules", str(rules), "--zones", str(zones_geojson),
                 "--zone-field", "district", "--periods", "2016,2020-2021"])
    stdout, err = capsys.readouterr()
    assert code == 0, err
    assert "zones (centre): west 5.40 ha" in stdout
    with xr.open_dataset(out / "trends.nc") as ds:  # netCDF4 through xarray: an outside reader
        assert list(ds["zone"].values) == ["west", "east", "all_zones", "outside_zones", "whole_map"]
        traj = ds["trajectory"].values
        area = ds["trajectory_zone_area"]
        for e in range(2):
            counts_west = np.bincount(traj[e, :, :6].ravel(), minlength=6)  # numpy count of the written map
            np.testing.assert_allclose(area.isel(endmember=e).sel(zone="west").values[:6], counts_west * 0.09)
            np.testing.assert_allclose(area.isel(endmember=e).sel(zone="whole_map").values[:6],
                                       np.bincount(traj[e].ravel(), minlength=6) * 0.09)
        loss = ds["loss"].values
        assert float(ds["rule_zone_area"].sel(rule="loss", zone="east", rule_state="true")) == pytest.approx(
            (loss[:5, 6:9] == 1).sum() * 0.09)
        classes = ds["cover_class"].values  # (period, y, x): 0 green, 1 unclassified, -1 no data
        assert list(ds["period"].values) == ["2016", "2020-2021"]
        change = ds["cover_change_area"].sel(zone="west").values
        hand = np.zeros((3, 3))
        for i, j in zip(classes[0, :, :6].ravel(), classes[1, :, :6].ravel()):
            hand[i, j] += 0.09  # index -1 is the last (no_data) row / column
        np.testing.assert_allclose(change, hand, atol=1e-9)
        assert change[0, 1] == pytest.approx(30 * 0.09)  # the 5 x 6 pixels that lost their green cover
        params = json.loads(ds.attrs["parameters"])
        assert len(params["zones"]["sha256"]) == 64 and params["zones"]["zones"] == ["west", "east"]
        assert str(zones_geojson) in ds.attrs["input_files"]
    csv = pd.read_csv(out / "zone_trajectory_areas.csv")
    assert set(csv.columns) == {"endmember", "zone", "trajectory", "area_ha", "share_pct"}
    change_csv = pd.read_csv(out / "cover_change.csv")
    west = change_csv[(change_csv.zone == "west") & (change_csv.from_class == "green")]
    assert float(west["unclassified"].iloc[0]) == pytest.approx(2.7, abs=1e-4)
    assert (out / "zone_rule_areas.csv").is_file()


def test_cover_change_without_zones_uses_first_and_last_year(tmp_path, fractions_nc, capsys):
    out = tmp_path / "out"
    assert main(["trends", str(fractions_nc), "--out", str(out), "--cover-change"]) == 0
    with xr.open_dataset(out / "trends.nc") as ds:
        assert list(ds["period"].values) == ["2016", "2021"]
        assert list(ds["zone"].values) == ["whole_map"]
        total = float(ds["cover_change_area"].sum())
        assert total == pytest.approx(10 * 12 * 0.09)
        assert list(ds["from_class"].values) == EMS + ["no_data"]  # dominant endmember
    assert not (out / "zone_trajectory_areas.csv").exists()
    assert "cover change 2016 -> 2021" in capsys.readouterr().out


@pytest.mark.parametrize("args,match", [
    (["--zones", "missing.geojson"], "does not exist"),
    (["--zones", "ZONES", "--zone-field", "nom"], "available: district"),
    (["--periods", "2030-2031,2032"], "holds no date"),
    (["--periods", "2016"], "two year ranges"),
    (["--zones", "ZONES", "--zone-field", "district", "--rules", "RULES"], "clashes with a variable"),
])
def test_bad_zone_options_are_one_line(tmp_path, fractions_nc, zones_geojson, capsys, args, match):
    rules = tmp_path / "rules.txt"
    rules.write_text("zone = green_vegetation:decrease\n", encoding="utf-8")
    args = [{"ZONES": str(zones_geojson), "RULES": str(rules)}.get(a, a) for a in args]
    code = main(["trends", str(fractions_nc), "--out", str(tmp_path / "o"), *args])
    _, err = capsys.readouterr()
    lines = [line for line in err.splitlines() if line.strip()]
    assert code == 2 and len(lines) == 1 and lines[0].startswith("unmix: error:"), err
    assert match in lines[0]
    assert not (tmp_path / "o" / "trends.nc").exists()
