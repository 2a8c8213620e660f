"""Tests of windows and annual composites on labelled cubes (unmix.cube.phenology).

References: ``numpy.nanmedian`` over the same observations selected here by Python ``datetime``
(day of year, season year), and the eager (numpy) result for the lazy (dask) one.
"""

from __future__ import annotations

import datetime as dt
import warnings

import dask.array as da
import numpy as np
import pytest
import xarray as xr

from unmix.comparability import DateWindow
from unmix.cube.phenology import annual_composites, select_window
from unmix.errors import EmptyWindowYearWarning, InputError, WindowSpreadWarning


def _cube(seed=0, n_time=60, shape=(3, 5, 4), nan_share=0.25, first="2003-06-01", step=37):
    rng = np.random.default_rng(seed)
    t = (np.datetime64(first) + np.arange(n_time) * step).astype("datetime64[ns]")
    values = rng.uniform(0, 1, (n_time,) + shape).astype(np.float32)
    values[rng.random(values.shape) < nan_share] = np.nan
    return xr.DataArray(values, dims=("time", "endmember", "y", "x"),
                        coords={"time": t, "endmember": ["soil", "tree", "grass"],
                                "sensor": ("time", ["landsat-8-oli"] * n_time)}, name="fraction")


def _season_year_python(t, start, end):
    """Season year by Python datetime: dates up to ``end`` belong to the season that began the year before."""
    d = dt.date.fromisoformat(str(t)[:10])
    doy = d.timetuple().tm_yday
    inside = (doy >= start or doy <= end) if start > end else start <= doy <= end
    return (d.year - (start > end and doy <= end)) if inside else None


def test_median_composites_equal_numpy_nanmedian_of_the_same_observations():
    cube = _cube()
    out = annual_composites(cube, DateWindow(doy_window=(300, 90)))
    assert out.dims == ("year", "endmember", "y", "x") and out.dtype == np.float32
    labels = [_season_year_python(t, 300, 90) for t in cube.time.values]
    for i, year in enumerate(out.year.values):
        sel = [k for k, y in enumerate(labels) if y == year]
        with warnings.catch_warnings():  # all-NaN pixels: numpy warns and gives NaN
            warnings.simplefilter("ignore", RuntimeWarning)
            ref = np.nanmedian(cube.values[sel].astype(np.float64), axis=0)  # numpy.nanmedian
        np.testing.assert_allclose(out.values[i], ref, rtol=1e-6, equal_nan=True)
        np.testing.assert_array_equal(out.n_obs.values[i], np.isfinite(cube.values[sel]).sum(axis=0))
        assert out.n_dates.values[i] == len(sel)
        days = np.sort(cube.time.values[sel].astype("datetime64[D]").astype(np.int64))
        assert out.time.values[i] == np.datetime64(int(np.floor(np.median(days))), "D")  # numpy median date


def test_lazy_composites_equal_eager_and_stay_lazy():
    cube = _cube(seed=1)
    window = DateWindow(doy_window=(300, 90))
    lazy_in = cube.copy(data=da.from_array(cube.values, chunks=(7, 1, 2, 3)))
    for method in ("median", "closest"):
        eager = annual_composites(cube, window, method=method)
        lazy = annual_composites(lazy_in, window, method=method)
        assert isinstance(lazy.data, da.Array) and isinstance(lazy.n_obs.data, da.Array)
        assert lazy.data.chunks[1:] == ((1, 1, 1), (2, 2, 1), (3, 1))  # spatial chunks kept
        np.testing.assert_array_equal(lazy.values, eager.values)  # eager (numpy) run
        np.testing.assert_array_equal(lazy.n_obs.values, eager.n_obs.values)
        np.testing.assert_array_equal(lazy.time.values, eager.time.values)
    on_dates = lazy.swap_dims(year="time")  # the form the trend tests take: real dates on time
    assert on_dates.dims[0] == "time" and np.issubdtype(on_dates.time.dtype, np.datetime64)


def test_closest_composite_takes_the_valid_date_nearest_the_target_across_the_new_year():
    t = np.array(["2001-12-20", "2002-01-03", "2002-02-20", "2002-12-30", "2003-01-30"], "datetime64[ns]")
    v = np.array([[1.0, 10.0], [2.0, np.nan], [3.0, 30.0], [4.0, 40.0], [5.0, 50.0]])
    cube = xr.DataArray(v, dims=("time", "x"), coords={"time": t})
    out = annual_composites(cube, DateWindow(doy_window=(335, 60)), method="closest", target_doy=1)
    # target 1 January: 2002-01-03 (2 days) in season 2001, 2002-12-30 (2.2 days) in season 2002; pixel x=1
    # has no data on 2002-01-03, so 2001-12-20 (12.2 days) is next (Python datetime arithmetic)
    assert out.values.tolist() == [[2.0, 10.0], [4.0, 40.0]]
    assert out.time.values.astype("datetime64[D]").astype(str).tolist() == ["2002-01-03", "2002-12-30"]


def test_select_window_is_lazy_and_names_reasons():
    cube = _cube(seed=2)
    lazy = cube.chunk({"time": 10})
    sel, why = select_window(lazy, DateWindow(doy_window=(335, 60), years=(2004, 2005, 2006)))
    assert isinstance(sel.data, da.Array)
    ref_keep = [(_season_year_python(t, 335, 60) or 0) in (2004, 2005, 2006) for t in cube.time.values]
    assert (why.values == "").tolist() == ref_keep  # Python datetime
    np.testing.assert_array_equal(sel.values, cube.values[ref_keep])
    assert why.sizes["time"] == cube.sizes["time"]


def test_too_few_dates_or_years_names_the_counts():
    cube = _cube(n_time=12)
    with pytest.raises(InputError, match=r"selects \d+ dates; the trend tests need at least 30"):
        select_window(cube, DateWindow(doy_window=(100, 200)), min_dates=30)
    years = {_season_year_python(t, 100, 200) for t in cube.time.values} - {None}  # Python datetime
    with pytest.raises(InputError, match=rf"selects {len(years)} years; the trend tests need at least 5"):
        annual_composites(cube, DateWindow(doy_window=(100, 200)), min_years=5)


def test_empty_years_warn_and_are_dropped_unless_kept():
    t = np.array(["2001-07-01", "2003-07-05", "2004-07-03"], "datetime64[ns]")
    cube = xr.DataArray([1.0, 2.0, 3.0], dims="time", coords={"time": t})
    with pytest.warns(EmptyWindowYearWarning, match="2002"):
        out = annual_composites(cube, DateWindow(doy_window=(150, 250)))
    assert out.year.values.tolist() == [2001, 2003, 2004]
    with pytest.warns(EmptyWindowYearWarning):
        full = annual_composites(cube, DateWindow(doy_window=(150, 250)), keep_empty=True)
    assert full.year.values.tolist() == [2001, 2002, 2003, 2004] and np.isnan(full.values[1])
    assert np.isnat(full.time.values[1]) and full.n_dates.values.tolist() == [1, 0, 1, 1]


def test_spread_over_the_limit_warns():
    t = np.array(["2001-05-01", "2002-08-20", "2003-05-03"], "datetime64[ns]")
    cube = xr.DataArray([1.0, 2.0, 3.0], dims="time", coords={"time": t})
    with pytest.warns(WindowSpreadWarning):
        select_window(cube, DateWindow(doy_window=(100, 250), max_spread_days=60))
    select_window(cube, DateWindow(doy_window=(100, 250), max_spread_days=120))  # 111 days apart: no warning


def test_bad_method_and_missing_target():
    cube = _cube(n_time=12)
    with pytest.raises(InputError, match="unknown composite method"):
        annual_composites(cube, DateWindow(), method="mean")
    with pytest.raises(InputError, match="target_doy"):
        annual_composites(cube, DateWindow(years=(2004,)), method="closest")
