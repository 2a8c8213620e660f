"""Tests of unmix.cube.trends: the lazy trend cube with map-wide FDR.

References beside the checks: scipy.stats.false_discovery_control (BH, CHECKS.md), pandas for
calendar arithmetic, pymannkendall.seasonal_test for the seasonal Kendall p-values, and the kernel
:func:`unmix.trajectory.classify_trajectories` run on the whole map at once (lazy == eager).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pymannkendall
import pytest
import scipy.stats
import xarray as xr

from unmix.cube.trends import SeasonScheme, season_labels, trend_cube
from unmix.dates import decimal_years as decimal_year
from unmix.errors import InputError, ShapeError, UnknownNameError
from unmix.trajectory import Trajectory, classify_trajectories, parse_rules

T = Trajectory
EMS = ["green_vegetation", "sand"]


def _cube(n_dates=32, ny=14, nx=17, seed=0, freq="QS"):
    """Fractions (time, endmember, y, x) float32 with known regions: a decline, a step, stable noise."""
    rng = np.random.default_rng(seed)
    time = pd.date_range("2014-01-01", periods=n_dates, freq=freq)
    f = (0.4 + rng.normal(0, 0.02, (n_dates, 2, ny, nx))).astype(np.float32)
    years = np.arange(n_dates) / 4
    f[:, 0, : ny // 2, :] -= (0.03 * years)[:, None, None].astype(np.float32)  # gv declines
    f[n_dates // 2 :, 1, ny // 2 :, : nx // 2] += 0.2  # sand steps up half way
    f[: n_dates - 5, :, 0, 0] = np.nan  # 5 valid dates: insufficient data
    f[:, 1, 3, 4] = np.nan  # all NaN for sand
    f[::3, 0, 5, 5] = np.nan  # gaps
    wkt = 'PROJCS["WGS 84 / UTM zone 33N",GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563]],PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433]],PROJECTION["Transverse_Mercator"],PARAMETER["latitude_of_origin",0],PARAMETER["central_meridian",15],PARAMETER["scale_factor",0.9996],PARAMETER["false_easting",500000],PARAMETER["false_northing",0],UNIT["metre",1],AUTHORITY["EPSG","32633"]]'
    gt = "500000.0 30.0 0.0 4100000.0 0.0 -30.0"
    ds = xr.Dataset(
        {
            "fractions": (("time", "endmember", "y", "x"), f, {"units": "1"}),
            "rmse": (("time", "y", "x"), np.zeros((n_dates, ny, nx), np.float32)),
        },
        coords={
            "time": time,
            "endmember": EMS,
            "y": 4100000.0 - 30.0 * (np.arange(ny) + 0.5),
            "x": 500000.0 + 30.0 * (np.arange(nx) + 0.5),
            "spatial_ref": ((), 0, {"crs_wkt": wkt, "GeoTransform": gt}),
        },
    )
    return ds


RULES = parse_rules(
    "loss = green_vegetation:decrease & !sand:increase\n"
    "sand_gain = sand:abrupt_increase\n"
    "any_change = green_vegetation:change | sand:change\n"
)


def _equal(a, b):
    if a.dtype.kind == "M":
        return np.array_equal(a.astype("int64"), b.astype("int64"))
    if a.dtype.kind in "US":
        return np.array_equal(a, b)
    return np.array_equal(a, b, equal_nan=a.dtype.kind == "f")


def test_lazy_equals_eager_and_stays_lazy():
    ds = _cube()
    eager = trend_cube(ds, rules=RULES)
    reads = []

    def spy(block):  # records every non-empty block the graph reads
        if block.size:
            reads.append(block.shape)
        return block

    chunked = ds.chunk({"time": 7, "endmember": 1, "y": 5, "x": 6})
    chunked["fractions"] = chunked["fractions"].copy(data=chunked["fractions"].data.map_blocks(spy, dtype=np.float32))
    lazy = trend_cube(chunked, rules=RULES)
    assert reads == []  # building the result read nothing
    for name, var in lazy.data_vars.items():
        if name != "rule_expression":
            assert var.chunks is not None, name  # nothing computed yet
    computed = lazy.compute()
    assert set(computed.data_vars) == set(eager.data_vars)
    for name in eager.data_vars:
        assert _equal(eager[name].values, computed[name].values), name
        assert eager[name].dtype == computed[name].dtype, name


def test_same_labels_as_the_kernel_on_the_whole_map():
    # chunked cube == kernel on the flattened map (one BH family per endmember), so FDR is map-wide
    ds = _cube(seed=1)
    out = trend_cube(ds.chunk({"y": 4, "x": 5})).compute()
    t = decimal_year(ds["time"].values)
    for e in range(2):
        y = np.moveaxis(ds["fractions"].values[:, e], 0, -1)  # (y, x, time)
        ref = classify_trajectories(y, t)
        np.testing.assert_array_equal(out["trajectory"].values[e], ref.trajectory)
        np.testing.assert_allclose(out["q_value"].values[e], ref.q_value, rtol=1e-6, equal_nan=True)
        np.testing.assert_allclose(out["slope"].values[e], ref.slope, rtol=1e-6, equal_nan=True)


def test_fdr_over_the_whole_map_equals_scipy():
    ds = _cube(seed=2)
    out = trend_cube(ds.chunk({"y": 3, "x": 4}), min_valid=8).compute()
    for e in range(2):
        n = out["n_valid"].values[e]
        fam = n >= 8
        for p_name, q_name in (("p_value", "q_value"), ("change_p", "change_q")):
            p = out[p_name].values[e][fam].astype(np.float64)
            ok = ~np.isnan(p)
            ref = scipy.stats.false_discovery_control(p[ok], method="bh")  # scipy reference
            got = out[q_name].values[e][fam][ok]
            np.testing.assert_allclose(got, ref, rtol=2e-6)
            assert np.isnan(out[q_name].values[e][~fam]).all()


def test_labels_change_dates_and_attributes():
    ds = _cube(seed=3)
    out = trend_cube(ds.chunk({"y": 7}), correction="hamed-rao")
    traj = out["trajectory"]
    # CF flags spelled exactly as the labels (brief)
    assert traj.attrs["flag_meanings"] == (
        "stable gradual_increase gradual_decrease abrupt_increase abrupt_decrease insufficient_data"
    )
    assert list(traj.attrs["flag_values"]) == [0, 1, 2, 3, 4, 5] and traj.dtype == np.int8
    assert out["slope"].attrs["units"] == "1/yr"
    assert out.attrs["endmember_names"] == "green_vegetation, sand"
    assert '"fdr_q": 0.05' in out.attrs["parameters"]
    out = out.compute()
    tr = out["trajectory"].values
    ny, nx = tr.shape[1:]
    # truth by construction in _cube
    gv_decline = tr[0, 1 : ny // 2, :]
    assert np.mean(gv_decline == T.GRADUAL_DECREASE) >= 0.9
    sand_step = tr[1, ny // 2 :, : nx // 2]
    assert np.mean(sand_step == T.ABRUPT_INCREASE) >= 0.9
    assert tr[0, 0, 0] == T.INSUFFICIENT_DATA and tr[1, 3, 4] == T.INSUFFICIENT_DATA
    # change_date is a real date: the first date after the break (index 16 of 32 quarterly dates)
    dates = out["change_date"].values
    assert dates.dtype.kind == "M"
    step_pixels = tr[1] == T.ABRUPT_INCREASE
    first_after = ds["time"].values[16]
    assert np.mean(dates[1][step_pixels] == first_after) >= 0.95
    assert np.isnat(dates[tr != T.ABRUPT_INCREASE]).all()
    assert np.all(np.abs(out["step"].values[1][step_pixels] - 0.2) < 0.05)


def test_rule_maps_and_areas():
    ds = _cube(seed=4)
    out = trend_cube(ds, rules=RULES, correction="hamed-rao")
    tr = out["trajectory"].values
    gv, sand = tr[0], tr[1]
    nodata = (gv == T.INSUFFICIENT_DATA) | (sand == T.INSUFFICIENT_DATA)
    expected = np.isin(gv, [2, 4]) & ~np.isin(sand, [1, 3])  # hand-written from the rule text
    got = out["loss"].values
    np.testing.assert_array_equal(got[~nodata], expected[~nodata].astype(np.uint8))
    assert (got[nodata] == 255).all()
    assert out["loss"].attrs["rule"] == "green_vegetation:decrease & !sand:increase"
    # 30 m pixels (GeoTransform): 0.09 ha each
    count = int((got == 1).sum())
    assert int(out["rule_pixels"].sel(rule="loss")) == count
    assert float(out["rule_area"].sel(rule="loss")) == pytest.approx(count * 0.09)
    assert float(out["rule_share"].sel(rule="loss")) == pytest.approx(count / (~nodata).sum())
    assert out["loss"].attrs["area_ha"] == pytest.approx(count * 0.09)  # eager input: also in attrs
    lazy = trend_cube(ds.chunk({"y": 5}), rules=RULES, correction="hamed-rao")
    assert float(lazy["rule_area"].sel(rule="sand_gain")) == pytest.approx(float(out["rule_area"].sel(rule="sand_gain")))


def test_geographic_crs_gives_no_area():
    ds = _cube(ny=6, nx=6, n_dates=12)
    ds = ds.assign_coords(spatial_ref=((), 0, {"crs_wkt": 'GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563]],PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433]]'}))
    out = trend_cube(ds, rules=RULES)
    assert np.isnan(out["rule_area"].values).all()
    assert "geographic" in out["rule_area"].attrs["comment"]


def test_decimal_year_against_pandas():
    times = pd.to_datetime(["2019-01-01", "2019-07-02 12:00", "2020-02-29", "2020-12-31 23:00", "2021-03-15"], format="mixed")
    # pandas reference: year + (elapsed seconds since 1 Jan) / (seconds in that year)
    start = pd.to_datetime([f"{y}-01-01" for y in times.year])
    end = pd.to_datetime([f"{y + 1}-01-01" for y in times.year])
    ref = times.year + (times - start).total_seconds() / (end - start).total_seconds()
    np.testing.assert_allclose(decimal_year(times.values), ref, rtol=0, atol=1e-12)
    with pytest.raises(InputError, match="datetime64"):
        decimal_year(np.arange(3.0))


def test_season_labels_against_pandas():
    times = pd.date_range("2019-01-15", periods=24, freq="MS")
    np.testing.assert_array_equal(season_labels(times.values, "month"), times.month)  # pandas month
    djf = {12: 0, 1: 0, 2: 0, 3: 1, 4: 1, 5: 1, 6: 2, 7: 2, 8: 2, 9: 3, 10: 3, 11: 3}  # meteorological seasons
    np.testing.assert_array_equal(season_labels(times.values, SeasonScheme.QUARTER), [djf[m] for m in times.month])
    assert season_labels(times.values, "none") is None
    with pytest.raises(InputError, match="season scheme"):
        season_labels(times.values, "weekly")


def test_monthly_seasonal_kendall_matches_pymannkendall():
    ds = _cube(n_dates=48, ny=6, nx=6, freq="MS", seed=5)
    season_wave = 0.1 * np.sin(2 * np.pi * np.arange(48) / 12)
    ds["fractions"] = ds["fractions"] + season_wave[:, None, None, None].astype(np.float32)
    ds["fractions"][:, :, 0, 0] = ds["fractions"][:, :, 1, 1]  # no NaN in the checked pixels
    out = trend_cube(ds.chunk({"x": 2}), season_scheme="month").compute()
    for e in range(2):
        for yy, xx in ((1, 1), (2, 3), (0, 2)):
            series = ds["fractions"].values[:, e, yy, xx].astype(np.float64)
            ref = pymannkendall.seasonal_test(series, period=12)  # pymannkendall reference
            assert out["p_value"].values[e, yy, xx] == pytest.approx(ref.p, rel=1e-4, abs=1e-7)
            assert out["tau"].values[e, yy, xx] == pytest.approx(ref.Tau, rel=1e-5)
    assert "seasonal Kendall (month)" in out.attrs["method"]


def test_monthly_scheme_uses_the_seasonal_sen_slope():
    # with seasons the slope is the seasonal Sen slope: pymannkendall.seasonal_sens_slope per cycle
    # (calendar months are not exactly 1/12 year in decimal years: agreement to 1e-3), and exactly
    # the kernel unmix.trend.seasonal_sen_slope on the decimal years of the dates
    from unmix.dates import decimal_years
    from unmix.trend import seasonal_sen_slope

    ds = _cube(n_dates=48, ny=6, nx=6, freq="MS", seed=5)
    ds["fractions"][:, :, 0, 0] = ds["fractions"][:, :, 1, 1]  # no NaN in the checked pixels
    out = trend_cube(ds.chunk({"x": 2}), season_scheme="month").compute()
    times = ds["time"].values
    for e in range(2):
        for yy, xx in ((1, 1), (2, 3), (0, 2)):
            series = ds["fractions"].values[:, e, yy, xx].astype(np.float64)
            ref = pymannkendall.seasonal_sens_slope(series, period=12)  # pymannkendall reference
            assert out["slope"].values[e, yy, xx] == pytest.approx(ref.slope, rel=1e-3, abs=1e-6)
            ours = seasonal_sen_slope(ds["fractions"].values[:, e, yy, xx], times.astype("datetime64[M]").astype(int) % 12,
                                      decimal_years(times))
            assert out["slope"].values[e, yy, xx] == ours.slope
            assert out["slope_low"].values[e, yy, xx] == ours.low
    assert "seasonal Sen slope" in out["slope"].attrs["long_name"]
    assert "seasonal Kendall" in out["p_value"].attrs["long_name"]


def test_bad_input_errors_name_the_problem():
    ds = _cube(ny=6, nx=6, n_dates=12)
    with pytest.raises(InputError, match="no 'fractions' variable"):
        trend_cube(ds.drop_vars("fractions"))
    with pytest.raises(ShapeError, match="dims"):
        trend_cube(ds["fractions"].isel(endmember=0))
    with pytest.raises(UnknownNameError, match="available: green_vegetation, sand"):
        trend_cube(ds, rules=parse_rules("x = soil:increase"))
    with pytest.raises(InputError, match="clashes"):
        trend_cube(ds, rules=parse_rules("slope = sand:increase"))
    with pytest.raises(InputError, match="correction"):
        trend_cube(ds, correction="bogus")
    with pytest.raises(InputError, match="strictly increasing"):
        trend_cube(ds.isel(time=[0, 2, 1, 3, 4, 5, 6, 7, 8, 9]))


@pytest.mark.parametrize("keeps", ["coordinate", "attributes"])
def test_crs_carried_from_unmixing_in_memory_to_trends_and_their_files(keeps, tmp_path):
    # A cube keeps its CRS in a grid-mapping coordinate or only as attributes (both CF / GDAL practice);
    # fractions unmixed in memory and their trends carry it, and the trends' GeoTIFF says the same CRS
    # and transform (read back by rasterio, which parses the GeoTIFF keys independently).
    import rasterio
    import rasterio.crs

    from unmix.cube import unmix_cube
    from unmix.io.products.cog import write_cog

    ds = _cube(n_dates=12, ny=6, nx=6)
    wkt = ds.spatial_ref.attrs["crs_wkt"]
    transform = (30.0, 0.0, 500000.0, 0.0, -30.0, 4100000.0)
    rng = np.random.default_rng(1)
    M = np.array([[0.05, 0.08, 0.30, 0.40], [0.20, 0.25, 0.30, 0.35]])
    cube = xr.DataArray((rng.random((12, 4, 6, 6)) * 0.3).astype(np.float32), dims=("time", "band", "y", "x"),
                        coords={"time": ds.time.values, "band": list("abcd"), "y": ds.y.values, "x": ds.x.values})
    if keeps == "coordinate":
        cube = cube.assign_coords(spatial_ref=ds.spatial_ref)
    else:
        cube.attrs.update(crs_wkt=wkt, transform=transform)
    trends = trend_cube(unmix_cube(cube, M, names=EMS))
    with rasterio.open(write_cog(trends.slope.isel(endmember=0), tmp_path / "slope.tif")) as src:
        assert src.crs == rasterio.crs.CRS.from_wkt(wkt)
        np.testing.assert_allclose(tuple(src.transform)[:6], transform)
