"""Report tables, figures and the HTML page built from small in-memory products."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from unmix.errors import OutputExistsError
from unmix.io.report import write_report
from unmix.report import CAUTION, build_report, trajectory_area_table
from unmix.report.figures import TRAJECTORY_COLOURS, series_figure
from unmix.trajectory import FLAG_MEANINGS, FLAG_VALUES


def _trends(rng, ny=12, nx=10):
    codes = rng.integers(0, len(FLAG_VALUES), (2, ny, nx)).astype(np.int8)
    x = 500_000.0 + 30.0 * (np.arange(nx) + 0.5)
    y = 4_000_000.0 - 30.0 * (np.arange(ny) + 0.5)
    traj = xr.DataArray(codes, dims=("endmember", "y", "x"),
                        attrs={"flag_values": np.asarray(FLAG_VALUES, dtype=np.int8), "flag_meanings": FLAG_MEANINGS})
    ds = xr.Dataset({"trajectory": traj, "slope": (("endmember", "y", "x"), rng.normal(0, 0.01, (2, ny, nx))),
                     "intercept": (("endmember", "y", "x"), rng.uniform(0, 1, (2, ny, nx)))},
                    coords={"endmember": ["green_vegetation", "sand"], "y": y, "x": x})
    return ds


def test_trajectory_area_table_counts_every_pixel():
    rng = np.random.default_rng(0)
    ds = _trends(rng)
    table = trajectory_area_table(ds)
    for name, group in table.groupby("Endmember"):
        assert group["Pixels"].sum() == 12 * 10
        # 30 m pixels are 0.09 ha each (900 m^2 / 10,000 m^2 per ha; unit definition)
        np.testing.assert_allclose(group["Area [ha]"], group["Pixels"] * 0.09)
        # shares are of the area with enough dates and add up to 100 %
        assert group["Share of valid area [%]"].sum(skipna=True) == pytest.approx(100.0)
        codes = ds["trajectory"].sel(endmember=name).values
        counts = pd.Series(codes.ravel()).value_counts()
        stable = FLAG_VALUES[FLAG_MEANINGS.split().index("stable")]
        assert int(group.loc[group["Trajectory"] == "stable", "Pixels"].iloc[0]) == counts.get(stable, 0)


def test_every_label_has_a_colour():
    assert set(FLAG_MEANINGS.split()) == set(TRAJECTORY_COLOURS)


def test_report_page_and_tables(tmp_path):
    rng = np.random.default_rng(1)
    trends = _trends(rng)
    times = np.array(["2020-01-01", "2020-07-01", "2021-01-01"], dtype="datetime64[ns]")
    fr = xr.Dataset({"fractions": (("time", "endmember", "y", "x"), rng.uniform(0, 1, (3, 2, 12, 10)).astype(np.float32)),
                     "rmse": (("time", "y", "x"), rng.uniform(0, 0.01, (3, 12, 10)))},
                    coords={"time": times, "endmember": ["green_vegetation", "sand"], "y": trends.y, "x": trends.x})
    page, tables, figures = build_report(fr, trends, title="Test report")
    assert CAUTION in page and page.count("data:image/png;base64,") == len(figures) >= 3
    assert {"fraction_periods", "trajectories"} <= set(figures)
    assert {"trajectory_areas", "rule_areas", "dates", "parameters"} <= set(tables)
    written = write_report(page, tables, tmp_path / "rep", figures=figures)
    assert [p.name for p in written][:3] == ["report.html", "trajectory_areas.csv", "rule_areas.csv"]
    assert all(p.exists() for p in written) and (tmp_path / "rep" / "figures" / "trajectories.png").exists()
    before = written[0].read_bytes()
    with pytest.raises(OutputExistsError):
        write_report("<html>other</html>", tables, tmp_path / "rep")
    assert written[0].read_bytes() == before
    fig = series_figure(fr["fractions"], {"a": (0, 0), "b": (5, 5)}, endmember="sand", trends=trends)
    assert len(fig.axes[0].lines) == 4  # two series, two Sen lines
