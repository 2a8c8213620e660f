"""Tests of ``unmix sample`` and ``unmix assess``: a stratified sample of a class map, interpreted, assessed.

Outside references: xarray reading the trends product (the map the points must fall in), pyogrio
(GDAL) reading the GeoJSON, pyproj for lon/lat, pandas reading the CSV tables, and the estimators'
own published checks in tests/test_accuracy_area.py; a known truth map stands in for the interpreter.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pyogrio
import pytest
import xarray as xr
from pyproj import Transformer

from unmix.accuracy import sample_size
from unmix.cli.main import main
from unmix.io.products import write_netcdf
from unmix.trajectory import FLAG_MEANINGS, FLAG_VALUES

UTM33 = 'PROJCS["WGS 84 / UTM zone 33N",GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563]],PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433]],PROJECTION["Transverse_Mercator"],PARAMETER["latitude_of_origin",0],PARAMETER["central_meridian",15],PARAMETER["scale_factor",0.9996],PARAMETER["false_easting",500000],PARAMETER["false_northing",0],UNIT["metre",1],AUTHORITY["EPSG","32633"]]'
NY, NX = 60, 80


def _maps():
    """Trajectory codes (endmember, y, x) and a rule map (y, x) with known classes."""
    traj = np.zeros((2, NY, NX), np.int8)  # stable
    traj[0, :15, :40] = 2  # gradual_decrease
    traj[0, 40:, 60:] = 4  # abrupt_decrease
    traj[0, 30:33, :] = 1  # gradual_increase
    traj[0, 0, :5] = 5  # insufficient_data: never sampled
    traj[1, 20:, :30] = 3
    rule = np.where(traj[0] == 2, 1, 0).astype(np.uint8)
    rule[traj[0] == 5] = 255
    return traj, rule


@pytest.fixture(scope="module")
def trends_nc(tmp_path_factory):
    traj, rule = _maps()
    ds = xr.Dataset(
        {
            "trajectory": (("endmember", "y", "x"), traj,
                           {"flag_values": FLAG_VALUES, "flag_meanings": FLAG_MEANINGS}),
            "loss": (("y", "x"), rule, {"flag_values": np.array([0, 1, 255], np.uint8),
                                        "flag_meanings": "false true insufficient_data"}),
        },
        coords={"endmember": ["soil", "gv"], "y": 4100000.0 - 30.0 * (np.arange(NY) + 0.5),
                "x": 500000.0 + 30.0 * (np.arange(NX) + 0.5)},
        attrs={"crs_wkt": UTM33},
    )
    return write_netcdf(ds, tmp_path_factory.mktemp("trends") / "trends.nc")


def _run(args, capsys):
    code = main(args)
    out, err = capsys.readouterr()
    assert code == 0, err
    return out


def _one_line_error(args, capsys):
    code = main(args)
    _, err = capsys.readouterr()
    lines = [line for line in err.splitlines() if line.strip()]
    assert code == 2 and len(lines) == 1 and lines[0].startswith("unmix: error:"), err
    return lines[0]


def test_sample_is_stratified_inside_its_classes_and_reproducible(tmp_path, trends_nc, capsys):
    out = _run(["sample", str(trends_nc), "--endmember", "soil", "--total", "300", "--min-per-class", "40",
                "--seed", "7", "--out", str(tmp_path / "a")], capsys)
    assert "unmix sample: wrote" in out and "gradual_decrease" in out
    pts = pd.read_csv(tmp_path / "a" / "sample.csv")
    strata = pd.read_csv(tmp_path / "a" / "strata.csv")
    with xr.open_dataset(trends_nc) as ds:  # xarray as the outside reader of the map
        m = ds["trajectory"].sel(endmember="soil").values
        xs, ys = ds["x"].values, ds["y"].values
    # every class but insufficient_data is a stratum, with its pixel count
    expected = {lab: int((m == code).sum()) for code, lab in enumerate(FLAG_MEANINGS.split()) if lab != "insufficient_data"}
    assert dict(zip(strata["map_class"], strata["mapped_pixels"])) == expected
    np.testing.assert_allclose(strata["mapped_area_ha"], strata["mapped_pixels"] * 0.09)  # 30 m pixels
    # sample sizes as asked: at least the minimum (or the whole class), the total by area
    assert strata["n_sample"].sum() == 300
    assert all(n >= min(40, p) for n, p in zip(strata["n_sample"], strata["mapped_pixels"]))
    assert pts.groupby("map_class").size().reindex(strata["map_class"], fill_value=0).tolist() == strata["n_sample"].tolist()
    # all points inside their class, at their pixel centre, no pixel twice, reference empty
    assert np.all(m[pts["row"], pts["col"]] == pts["map_code"])
    np.testing.assert_allclose(pts["x"], xs[pts["col"]])
    np.testing.assert_allclose(pts["y"], ys[pts["row"]])
    assert not pts.duplicated(["row", "col"]).any() and pts["reference"].isna().all()
    # lon/lat by pyproj
    lon, lat = Transformer.from_crs(32633, 4326, always_xy=True).transform(pts["x"].values, pts["y"].values)
    np.testing.assert_allclose(pts["lon"], lon, atol=1e-9)
    np.testing.assert_allclose(pts["lat"], lat, atol=1e-9)
    # the same seed gives the same points
    _run(["sample", str(trends_nc), "--endmember", "soil", "--total", "300", "--min-per-class", "40",
          "--seed", "7", "--out", str(tmp_path / "b")], capsys)
    assert (tmp_path / "a" / "sample.csv").read_bytes() == (tmp_path / "b" / "sample.csv").read_bytes()


def test_sample_geojson_is_read_by_gdal_in_the_map_crs(tmp_path, trends_nc, capsys):
    _run(["sample", str(trends_nc), "--map", "loss", "--per-class", "25", "--out", str(tmp_path)], capsys)
    pts = pd.read_csv(tmp_path / "sample.csv", dtype={"map_class": str})
    assert pts.groupby("map_class").size().to_dict() == {"false": 25, "true": 25}
    info = pyogrio.read_info(tmp_path / "sample.geojson")  # GDAL's GeoJSON driver
    assert info["crs"] == "EPSG:32633" and info["features"] == 50
    gdf = pyogrio.read_dataframe(tmp_path / "sample.geojson")
    assert gdf.crs.to_epsg() == 32633
    gdf = gdf.set_index("point_id").loc[pts["point_id"]]
    np.testing.assert_allclose(gdf.geometry.x, pts["x"])
    np.testing.assert_allclose(gdf.geometry.y, pts["y"])
    assert gdf["reference"].isna().all() and (gdf["map_class"].to_numpy() == pts["map_class"].to_numpy()).all()
    about = json.loads((tmp_path / "sample.geojson").read_text())["unmix"]  # provenance of the draw
    assert about["map"] == "loss" and about["seed"] == 0 and about["product"] == str(trends_nc)


def test_default_sample_size_follows_eq_13(tmp_path, trends_nc, capsys):
    _run(["sample", str(trends_nc), "--endmember", "gv", "--target-se", "0.02", "--expected-accuracy",
          "0.85,abrupt_increase=0.7", "--min-per-class", "10", "--out", str(tmp_path)], capsys)
    strata = pd.read_csv(tmp_path / "strata.csv")
    acc = np.where(strata["map_class"] == "abrupt_increase", 0.7, 0.85)
    # Olofsson et al. (2014) eq. 13 with the finite population term (Cochran 1977, eq. 5.25)
    s = np.sqrt(acc * (1 - acc))
    w = strata["mapped_pixels"] / strata["mapped_pixels"].sum()
    n = (w * s).sum() ** 2 / (0.02 ** 2 + (w * s ** 2).sum() / strata["mapped_pixels"].sum())
    assert sample_size(strata["mapped_pixels"], acc, 0.02, population=int(strata["mapped_pixels"].sum())) == np.ceil(n)
    # classes without pixels get no points; the rest share ceil(n) with at least 10 each
    present = strata["mapped_pixels"] > 0
    assert (strata.loc[~present, "n_sample"] == 0).all() and (strata.loc[present, "n_sample"] >= 10).all()
    assert strata["n_sample"].sum() == max(int(np.ceil(n)), 10 * int(present.sum()))


def _interpret(sample_dir, truth, column="reference", fmt="csv"):
    """Fill in the reference of every point with the class of a truth map (codes -> labels)."""
    labels = FLAG_MEANINGS.split()
    if fmt == "csv":
        pts = pd.read_csv(sample_dir / "sample.csv", dtype={"map_class": str})
        pts[column] = [labels[c] for c in truth[pts["row"], pts["col"]]]
        pts.to_csv(sample_dir / "sample.csv", index=False)
        return sample_dir / "sample.csv"
    doc = json.loads((sample_dir / "sample.geojson").read_text())
    for f in doc["features"]:
        f["properties"][column] = labels[truth[f["properties"]["row"], f["properties"]["col"]]]
    (sample_dir / "sample.geojson").write_text(json.dumps(doc))
    return sample_dir / "sample.geojson"


@pytest.mark.parametrize("fmt", ["csv", "geojson"])
def test_a_perfect_map_gives_full_accuracy_and_the_mapped_areas(tmp_path, trends_nc, capsys, fmt):
    s = tmp_path / "s"
    _run(["sample", str(trends_nc), "--endmember", "soil", "--total", "200", "--out", str(s)], capsys)
    truth = _maps()[0][0]
    sample_file = _interpret(s, truth, fmt=fmt)
    out = _run(["assess", str(sample_file), "--out", str(tmp_path / "r")], capsys)
    assert "overall accuracy 1.000" in out
    acc = pd.read_csv(tmp_path / "r" / "accuracy.csv", index_col="class")
    strata = pd.read_csv(s / "strata.csv", index_col="map_class")
    sampled = strata["n_sample"] > 0
    np.testing.assert_allclose(acc.loc[sampled, "area_ha"], strata.loc[sampled, "mapped_area_ha"], rtol=1e-9)
    np.testing.assert_allclose(acc.loc[sampled, ["users_accuracy", "producers_accuracy"]], 1.0)
    overall = pd.read_csv(tmp_path / "r" / "overall.csv")
    assert overall["overall_accuracy"].iloc[0] == 1.0
    matrix = pd.read_csv(tmp_path / "r" / "error_matrix.csv", index_col=0)
    assert matrix.values.sum() == pytest.approx(1.0)


def test_estimated_areas_bracket_the_true_areas(tmp_path, trends_nc, capsys):
    # the truth differs from the map: part of the stable class is really gradual_decrease, part of the
    # abrupt_decrease class is stable; the true areas are known by counting pixels of the truth map
    traj = _maps()[0][0]
    truth = traj.copy()
    truth[15:22, :40] = 2
    truth[40:44, 60:] = 0
    truth[50:, 5:20] = 2
    s = tmp_path / "s"
    _run(["sample", str(trends_nc), "--endmember", "soil", "--total", "600", "--min-per-class", "60",
          "--seed", "3", "--out", str(s)], capsys)
    out = _run(["assess", str(_interpret(s, truth)), "--out", str(tmp_path / "r")], capsys)
    assert "±" in out
    acc = pd.read_csv(tmp_path / "r" / "accuracy.csv", index_col="class")
    valid = traj != 5
    for code, name in [(0, "stable"), (1, "gradual_increase"), (2, "gradual_decrease"), (4, "abrupt_decrease")]:
        true_ha = np.count_nonzero((truth == code) & valid) * 0.09
        assert abs(acc.loc[name, "area_ha"] - true_ha) <= acc.loc[name, "area_ci95_ha"] + 1e-9, name
        assert acc.loc[name, "area_ci95_ha"] > 0 or name == "gradual_increase"
    # the map overstates abrupt_decrease: its user's accuracy is below 1
    assert acc.loc["abrupt_decrease", "users_accuracy"] < 0.95


def test_bad_input_gives_one_line_and_exit_2(tmp_path, trends_nc, capsys):
    line = _one_line_error(["sample", str(trends_nc), "--map", "nothing", "--out", str(tmp_path / "x")], capsys)
    assert "nothing" in line and "trajectory" in line and "loss" in line
    line = _one_line_error(["sample", str(trends_nc), "--out", str(tmp_path / "x")], capsys)
    assert "--endmember" in line and "soil" in line
    line = _one_line_error(["sample", str(trends_nc), "--map", "loss", "--total", "9", "--per-class", "3",
                            "--out", str(tmp_path / "x")], capsys)
    assert "--per-class" in line
    s = tmp_path / "s"
    _run(["sample", str(trends_nc), "--map", "loss", "--per-class", "5", "--out", str(s)], capsys)
    line = _one_line_error(["assess", str(s / "sample.csv"), "--out", str(tmp_path / "r")], capsys)
    assert "no reference class" in line and "line 2" in line and "false, true" in line
    pts = pd.read_csv(s / "sample.csv", dtype={"map_class": str})
    pts["reference"] = ["true"] * 5 + ["ture"] + ["false"] * 4
    pts.to_csv(s / "sample.csv", index=False)
    line = _one_line_error(["assess", str(s / "sample.csv"), "--out", str(tmp_path / "r")], capsys)
    assert "'ture'" in line and "line 7" in line
    line = _one_line_error(["assess", str(tmp_path / "missing.csv"), "--out", str(tmp_path / "r")], capsys)
    assert "strata" in line or "missing.csv" in line
    assert not (tmp_path / "r" / "accuracy.csv").exists()
    # reference names ignore case and blanks
    pts["reference"] = [" TRUE"] * 5 + ["False "] * 5
    pts.to_csv(s / "sample.csv", index=False)
    _run(["assess", str(s / "sample.csv"), "--out", str(tmp_path / "r")], capsys)
    counts = pd.read_csv(tmp_path / "r" / "sample_counts.csv", index_col=0)
    assert counts.to_numpy().sum() == 10
