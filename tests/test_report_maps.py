"""Report figure primitives (unmix.report.maps, trend_maps, series, palettes) on a small product made
by the real commands (``unmix trends`` on a fractions product written with the project's writer)."""

from __future__ import annotations

import json

import matplotlib
import numpy as np
import pandas as pd
import pytest
import rasterio
import xarray as xr
from matplotlib.colors import TwoSlopeNorm, to_rgba
from matplotlib.figure import Figure
from matplotlib.image import AxesImage

from unmix.cli.main import main
from unmix.dates import decimal_years
from unmix.errors import InputError
from unmix.io.products import open_product, write_netcdf
from unmix.report import maps, series, trend_maps
from unmix.report._mapping import nice_length
from unmix.report.palettes import (
    MIN_LIGHTNESS_STEP,
    NODATA_COLOUR,
    RULE_COLOURS,
    TRAJECTORY_PALETTE,
    lightness,
)

matplotlib.use("Agg")
EMS = ["green_vegetation", "sand"]
CRS = rasterio.crs.CRS.from_epsg(32633)


@pytest.fixture(scope="module")
def products(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report_maps")
    rng = np.random.default_rng(5)
    n_dates, ny, nx = 24, 8, 7
    time = pd.date_range("2016-01-01", periods=n_dates, freq="QS")
    f = (0.4 + rng.normal(0, 0.015, (n_dates, 2, ny, nx))).astype(np.float32)
    f[:, 0, :3] -= (0.04 * np.arange(n_dates) / 4)[:, None, None].astype(np.float32)  # gv declines
    f[12:, 1, 4:, :2] += 0.25  # sand steps up at date 12
    f[:, :, 7, 6] = np.nan  # no data
    f[[1, 5], :, 0, 0] = np.nan  # cloudy dates in the first year
    rmse = rng.uniform(0, 0.04, (n_dates, ny, nx)).astype(np.float32)
    rmse[:, 7, 6] = np.nan
    ds = xr.Dataset(
        {"fractions": (("time", "endmember", "y", "x"), f, {"units": "1"}),
         "rmse": (("time", "y", "x"), rmse),
         "valid_count": (("y", "x"), np.isfinite(f[:, 0]).sum(0).astype(np.int16))},
        coords={"time": time, "endmember": EMS, "y": 4100000.0 - 30.0 * (np.arange(ny) + 0.5),
                "x": 500000.0 + 30.0 * (np.arange(nx) + 0.5)},
        attrs={"crs_wkt": CRS.to_wkt()})
    write_netcdf(ds, folder / "fractions.nc")
    (folder / "rules.txt").write_text("greening_loss = green_vegetation:decrease\n"
                                      "sand_gain = sand:increase\n", encoding="utf-8")
    assert main(["trends", str(folder / "fractions.nc"), "--out", str(folder), "--rules", str(folder / "rules.txt")]) == 0
    fr, tr = open_product(folder / "fractions.nc"), open_product(folder / "trends.nc")
    yield fr, tr, f
    fr.close()
    tr.close()


def _legend_colours(fig: Figure) -> dict[str, tuple]:
    handles = [h for legend in fig.legends for h in legend.legend_handles]
    return {h.get_label(): tuple(np.round(h.get_facecolor(), 6)) for h in handles}


def _images(fig: Figure) -> list[AxesImage]:
    return [im for ax in fig.axes for im in ax.get_images()]


def _scale_bar(ax):
    bars = [p for p in ax.patches if p.get_gid() == "scale_bar"]
    label = [t for t in ax.texts if t.get_gid() == "scale_bar_label"]
    return bars, label


def test_every_figure_builds_with_crs_scale_bar_and_legend(products):
    fr, tr, _ = products
    figures = [maps.fraction_period_maps(fr["fractions"]),
               maps.rgb_composite_figure(fr["fractions"], ["sand", "green_vegetation", "sand"]),
               maps.valid_count_map(fr["valid_count"], fr.sizes["time"]), maps.rmse_map(fr["rmse"]),
               trend_maps.slope_maps(tr), trend_maps.trajectory_maps(tr), trend_maps.change_date_maps(tr),
               trend_maps.rule_maps(tr)]
    for fig in figures:
        assert isinstance(fig, Figure)
        assert "WGS 84 / UTM zone 33N (EPSG:32633)" in fig.get_supxlabel()  # CRS stated
        assert fig.legends and any("data" in label for label in _legend_colours(fig))  # no data has an entry
        map_axes = [ax for ax in fig.axes if ax.get_images()]
        assert map_axes and all(len(_scale_bar(ax)[0]) == 2 for ax in map_axes)


def test_legend_colours_are_distinct_and_no_data_is_none_of_the_classes(products):
    fr, tr, _ = products
    for fig in (trend_maps.trajectory_maps(tr), trend_maps.rule_maps(tr), trend_maps.slope_maps(tr),
                trend_maps.change_date_maps(tr), maps.rgb_composite_figure(fr["fractions"], EMS + ["sand"])):
        colours = _legend_colours(fig)
        assert len(set(colours.values())) == len(colours), colours
        nodata = [c for label, c in colours.items() if "data" in label]
        assert nodata == [tuple(np.round(to_rgba(NODATA_COLOUR), 6))]
        handle = next(h for legend in fig.legends for h in legend.legend_handles if "data" in h.get_label())
        assert handle.get_hatch()  # hatched: not the plain grey of any class either


def test_categorical_maps_use_the_palette_and_hatch_no_data(products):
    _, tr, _ = products
    fig = trend_maps.trajectory_maps(tr)
    codes = tr["trajectory"].values
    flags = dict(zip(tr["trajectory"].attrs["flag_values"].tolist(), tr["trajectory"].attrs["flag_meanings"].split()))
    for i, ax in enumerate(a for a in fig.axes if a.get_images()):
        drawn = ax.get_images()[0].get_array()  # (y, x, 4) RGBA of the classes
        for code, name in flags.items():
            where = codes[i] == code
            if name == "insufficient_data":
                assert (drawn[where][:, 3] == 0).all()  # left to the hatched layer above
                assert len(ax.get_images()) == 2 and where.any()
            elif where.any():
                np.testing.assert_allclose(drawn[where], np.tile(to_rgba(TRAJECTORY_PALETTE[name]), (where.sum(), 1)))


def test_slope_norm_is_centred_and_non_significant_pixels_are_masked(products):
    _, tr, _ = products
    q_product = json.loads(tr.attrs["parameters"])["fdr_q"]
    for q in (None, 0.3):
        fig = trend_maps.slope_maps(tr, q=q)
        level = q_product if q is None else q
        slope_images = [im for im in _images(fig) if isinstance(im.norm, TwoSlopeNorm)]
        assert len(slope_images) == 2
        for i, im in enumerate(slope_images):
            assert im.norm.vcenter == 0.0 and im.norm.vmin == -im.norm.vmax
            qv = tr["q_value"].values[i]
            expected = (qv > level) | np.isnan(qv) | np.isnan(tr["slope"].values[i])
            np.testing.assert_array_equal(np.ma.getmaskarray(im.get_array()), expected)
    assert (tr["q_value"].values[0, :3] <= q_product).any()  # fixture truth: the decline is significant


@pytest.mark.filterwarnings("ignore:All-NaN slice:RuntimeWarning")
def test_period_composites_equal_numpy_nanmedian(products):
    fr, _, f = products
    time = fr["time"].values
    for year in (2016, 2021):
        picked = time.astype("datetime64[Y]").astype(int) + 1970 == year
        expected = np.nanmedian(f[picked], axis=0)  # numpy as the reference
        comp = maps.period_composite(fr["fractions"], f"{year}-01-01", f"{year + 1}-01-01")
        np.testing.assert_allclose(comp.values, expected, rtol=1e-6)
        assert comp.attrs["n_dates"] == picked.sum() == 4
    assert [p[0] for p in maps.default_periods(time)] == ["2016", "2021"]
    fig = maps.fraction_period_maps(fr["fractions"])
    first = _images(fig)[0].get_array()
    np.testing.assert_allclose(first.filled(np.nan), np.nanmedian(f[:4, 0], axis=0), rtol=1e-6)
    with pytest.raises(InputError, match="2030"):
        maps.period_composite(fr["fractions"], "2030-01-01", "2031-01-01")


def _grid(nx, ny, res, crs):
    x = 300000.0 + res * (np.arange(nx) + 0.5) if not crs.is_geographic else 10.0 + res * (np.arange(nx) + 0.5)
    y = 5000000.0 - res * (np.arange(ny) + 0.5) if not crs.is_geographic else 50.0 - res * (np.arange(ny) + 0.5)
    return xr.DataArray(np.full((ny, nx), 5, np.int16), dims=("y", "x"), coords={"y": y, "x": x},
                        attrs={"crs_wkt": crs.to_wkt()})


@pytest.mark.parametrize("nx, res, metres, text", [(400, 30.0, 2000.0, "2 km"), (7, 30.0, 50.0, "50 m"),
                                                   (90, 10.0, 200.0, "200 m")])
def test_scale_bar_is_a_round_length_drawn_to_scale(nx, res, metres, text):
    fig = maps.valid_count_map(_grid(nx, 20, res, CRS))
    ax = next(a for a in fig.axes if a.get_images())
    bars, label = _scale_bar(ax)
    # UTM map units are metres: the bar's two halves together span the stated length in data units
    assert sum(b.get_width() for b in bars) == pytest.approx(metres)
    assert label[0].get_text() == text
    mantissa = metres / 10 ** np.floor(np.log10(metres))
    assert mantissa in (1.0, 2.0, 5.0) and metres <= nx * res / 4
    assert nice_length(nx * res) == metres


def test_geographic_crs_gets_longitude_latitude_ticks():
    fig = maps.valid_count_map(_grid(30, 20, 0.001, rasterio.crs.CRS.from_epsg(4326)))
    ax = next(a for a in fig.axes if a.get_images())
    fig.canvas.draw()
    assert not _scale_bar(ax)[0]
    assert all("°E" in t.get_text() for t in ax.get_xticklabels() if t.get_text())
    assert all("°N" in t.get_text() for t in ax.get_yticklabels() if t.get_text())
    assert "EPSG:4326" in fig.get_supxlabel()


def test_palettes_stay_apart_in_grey():
    # CIE L* of the sRGB primaries and of #777777 (published Lab values of sRGB colours; from memory)
    np.testing.assert_allclose(lightness(["#FF0000", "#00FF00", "#0000FF", "#777777"]),
                               [53.24, 87.73, 32.30, 50.03], atol=0.02)
    for palette in (TRAJECTORY_PALETTE, RULE_COLOURS):
        levels = lightness(list(palette.values()))
        gaps = np.abs(levels[:, None] - levels[None, :])[np.triu_indices(len(levels), 1)]
        assert gaps.min() >= MIN_LIGHTNESS_STEP, dict(zip(palette, levels.round(1)))
    assert TRAJECTORY_PALETTE["insufficient_data"] == RULE_COLOURS["insufficient_data"] == NODATA_COLOUR


def test_change_date_map_shows_abrupt_pixels_as_decimal_years(products):
    _, tr, _ = products
    fig = trend_maps.change_date_maps(tr)
    images = [im for im in _images(fig) if im.get_array().ndim == 2]
    dates = tr["change_date"].values
    for i, im in enumerate(images):
        have = ~np.isnat(dates[i])
        shown = im.get_array()
        np.testing.assert_array_equal(~np.ma.getmaskarray(shown), have)
        if have.any():
            np.testing.assert_allclose(shown[have], decimal_years(dates[i][have]))
    assert (~np.isnat(dates[1, 4:, :2])).all()  # fixture truth: the sand step


def test_point_series_sen_line_and_interval(products):
    fr, tr, f = products
    x, y = float(fr["x"][1]), float(fr["y"][5])
    fig = series.point_series_figure(fr["fractions"], {"step": (x + 10.0, y - 10.0)}, endmember="sand", trends=tr)
    ax = fig.axes[0]
    observed, line = ax.lines[:2]
    np.testing.assert_array_equal(observed.get_ydata(), f[:, 1, 5, 1])
    at = tr.sel(endmember="sand").isel(y=5, x=1)
    expected = float(at["intercept"]) + float(at["slope"]) * decimal_years(fr["time"].values)
    np.testing.assert_allclose(line.get_ydata(), expected, rtol=1e-6)
    assert len(ax.collections) == 1  # the interval band
    with pytest.raises(InputError, match="outside the raster"):
        series.point_series_figure(fr["fractions"], {"far": (0.0, 0.0)}, endmember="sand")


def test_zone_series_means_and_sen_line_match_scipy(products):
    from scipy.stats import theilslopes

    fr, _, f = products
    zone = np.zeros((8, 7), bool)
    zone[:3] = True
    fig = series.zone_series_figure(fr["fractions"], {"north": zone}, endmember="green_vegetation")
    means, line = fig.axes[0].lines[:2]
    expected = np.nanmean(f[:, 0][:, zone], axis=1)
    np.testing.assert_allclose(means.get_ydata(), expected, rtol=1e-6)
    years = decimal_years(fr["time"].values)
    ref = theilslopes(expected, years)  # scipy: same median-based intercept convention
    np.testing.assert_allclose(line.get_ydata(), ref.intercept + ref.slope * years, rtol=1e-6)
    with pytest.raises(InputError, match="at least one pixel"):
        series.zone_series_figure(fr["fractions"], {"empty": np.zeros((8, 7), bool)}, endmember="sand")


@pytest.mark.filterwarnings("ignore:All-NaN slice:RuntimeWarning")
def test_rmse_share_counts_pixels_above_the_limit(products):
    fr, _, _ = products
    median, share = maps.rmse_share(fr["rmse"], 0.02)
    reference = np.nanmedian(fr["rmse"].values, axis=0)  # numpy as the reference
    np.testing.assert_allclose(median, reference, rtol=1e-6)
    have = np.isfinite(reference)
    assert share == pytest.approx((reference[have] > 0.02).mean())
    assert "%" in maps.rmse_map(fr["rmse"], 0.02).axes[0].get_title()


def test_large_maps_are_thinned_for_display_only():
    from unmix.report._mapping import DISPLAY_LIMIT

    grid = _grid(3100, 40, 30.0, CRS)
    grid[:, ::2] = 0  # every other column without data
    fig = maps.valid_count_map(grid)
    ax = next(a for a in fig.axes if a.get_images())
    step = int(np.ceil(3100 / DISPLAY_LIMIT))  # 3: the smallest step that fits
    shown = ax.get_images()[0]
    assert shown.get_array().shape == (int(np.ceil(40 / step)), int(np.ceil(3100 / step)))
    # every step-th pixel (north-up grid): its no-data mask is the thinned one
    np.testing.assert_array_equal(np.ma.getmaskarray(shown.get_array()), grid.values[::step, ::step] == 0)
    # the drawn extent is still the whole raster (pixel edges in metres)
    np.testing.assert_allclose(shown.get_extent(), [300000.0, 300000.0 + 3100 * 30, 5000000.0 - 40 * 30, 5000000.0])
