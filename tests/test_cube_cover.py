"""Cover classes per period and from-to tables: against numpy medians, argmax and a hand count of pairs."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pyproj
import pytest
import shapely
import xarray as xr

from unmix.cover import parse_class_rules
from unmix.cube.cover import (
    Period,
    default_periods,
    from_to_frame,
    from_to_table,
    parse_periods,
    period_classes,
    period_fractions,
)
from unmix.cube.zones import Zones, zone_weights
from unmix.errors import InputError, LibraryFormatError, UnknownNameError

EMS = ["gv", "soil", "shade"]


def _fractions(seed=0, ny=12, nx=10):
    rng = np.random.default_rng(seed)
    time = pd.date_range("2015-01-15", periods=24, freq="QS")  # 2015-04-01 .. 2021-01-01
    f = rng.dirichlet([1, 1, 1], size=(24, ny, nx)).astype(np.float32).transpose(0, 3, 1, 2)
    gap = rng.random((24, ny, nx)) < 0.2  # whole-pixel gaps, as FCLS leaves them
    f[np.broadcast_to(gap[:, None], f.shape)] = np.nan
    f[:3, :, 0, 0] = np.nan  # no valid date in 2015 (April, July, October)
    return xr.DataArray(f, dims=("time", "endmember", "y", "x"), coords={
        "time": time, "endmember": EMS, "y": 4100000.0 - 30.0 * (np.arange(ny) + 0.5),
        "x": 500000.0 + 30.0 * (np.arange(nx) + 0.5),
        "spatial_ref": ((), 0, {"crs_wkt": pyproj.CRS.from_epsg(32633).to_wkt()})})


def _numpy_classes(fr, first, last):
    years = pd.DatetimeIndex(fr["time"].values).year
    sel = fr.values[(years >= first) & (years <= last)]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN pixels
        med = np.nanmedian(sel, axis=0)  # numpy's median: the reference
    codes = np.argmax(np.nan_to_num(med, nan=-1.0), axis=0)
    codes[np.isnan(med).any(axis=0)] = -1
    return med, codes


def test_period_fractions_and_dominant_classes_match_numpy():
    fr = _fractions()
    med, codes = _numpy_classes(fr, 2015, 2015)
    got = period_fractions(fr, Period(2015, 2015))
    np.testing.assert_allclose(got.transpose("endmember", "y", "x").values, med, rtol=1e-6)
    classes, names = period_classes(fr, Period(2015, 2015))
    assert names == EMS
    np.testing.assert_array_equal(classes.values, codes)
    assert classes.values[0, 0] == -1


def test_from_to_table_against_a_hand_count():
    fr = _fractions(seed=5)
    _, a = _numpy_classes(fr, 2015, 2016)
    _, b = _numpy_classes(fr, 2019, 2020)
    zone = shapely.box(500000.0, 4099700.0, 500150.0, 4100000.0)  # rows 0-9, cols 0-4
    ca, names = period_classes(fr, Period(2015, 2016))
    cb, _ = period_classes(fr, Period(2019, 2020))
    table = from_to_table(ca, cb, names, zone_weights(Zones(("west",), (zone,)), ca))
    n = len(names) + 1
    for key, rows, cols in (("west", slice(0, 10), slice(0, 5)), ("whole_map", slice(None), slice(None))):
        hand = np.zeros((n, n))
        for i, j in zip(np.where(a < 0, n - 1, a)[rows, cols].ravel(), np.where(b < 0, n - 1, b)[rows, cols].ravel()):
            hand[i, j] += 0.09  # a 30 m pixel is 0.09 ha
        np.testing.assert_allclose(table["area_ha"].sel(zone=key).values, hand, atol=1e-9)
    total = table["area_ha"].sel(zone="whole_map").values.sum()
    assert total == pytest.approx(12 * 10 * 0.09)
    frame = from_to_frame(table, Period(2015, 2016), Period(2019, 2020))
    assert list(frame.columns) == ["zone", "from_period", "to_period", "from_class", *EMS, "no_data"]
    assert len(frame) == table.sizes["zone"] * n


def test_lazy_from_to_equals_eager_and_rule_classes():
    fr = _fractions(seed=2)
    rules = parse_class_rules("class green = gv >= 0.5\nclass bare = soil >= 0.4 & gv < 0.3\nclass green = shade > 0.8\n")
    lazy = fr.chunk({"time": 5, "y": 5, "x": 4})
    zones = Zones(("a", "b"), (shapely.box(500000, 4099700, 500150, 4100000), shapely.box(500150, 4099640, 500300, 4100000)))
    out = []
    for data in (fr, lazy):
        ca, names = period_classes(data, Period(2015, 2016), rules)
        cb, _ = period_classes(data, Period(2019, 2020), rules)
        out.append(from_to_table(ca, cb, names, zone_weights(zones, ca)))
        if data is lazy:
            assert ca.chunks is not None and out[-1]["area_ha"].chunks is not None
    np.testing.assert_allclose(out[1]["area_ha"].values, out[0]["area_ha"].values)
    assert names == ["green", "bare", "unclassified"]
    med, _ = _numpy_classes(fr, 2015, 2016)
    # hand-written from the rule text: first line that holds wins
    hand = np.full(med.shape[1:], 2)
    bare = (med[1] >= 0.4) & (med[0] < 0.3)
    green2 = med[2] > 0.8
    hand[green2] = 0
    hand[bare] = 1
    hand[med[0] >= 0.5] = 0
    hand[np.isnan(med).any(axis=0)] = -1
    np.testing.assert_array_equal(period_classes(fr, Period(2015, 2016), rules)[0].values, hand)


def test_periods_parse_and_default():
    assert parse_periods("2005-2006, 2013-2014") == (Period(2005, 2006), Period(2013, 2014))
    assert default_periods(_fractions()["time"].values) == (Period(2015, 2015), Period(2021, 2021))
    for bad in ("2005", "2006-2005,2010", "20x5,2010", "2005,2006,2007"):
        with pytest.raises(InputError, match="--periods"):
            parse_periods(bad)
    with pytest.raises(InputError, match="holds no date"):
        period_fractions(_fractions(), Period(1990, 1991))


def test_class_rule_errors():
    with pytest.raises(LibraryFormatError, match="line 2, column 14"):
        parse_class_rules("# c\nclass wood = gv => 0.5\n")
    with pytest.raises(LibraryFormatError, match="unclassified"):
        parse_class_rules("class unclassified = gv > 0.1")
    with pytest.raises(UnknownNameError, match="available: gv, soil, shade"):
        period_classes(_fractions(), Period(2015, 2015), parse_class_rules("class w = tree > 0.5"))
