"""Tests of phenological windows and annual composites (unmix.comparability.phenology).

References outside the package: Python's ``datetime`` (day of year, leap years), ``numpy.nanmedian``
(per-group medians) and a brute-force ``numpy.argmin`` over the circular day distance written here.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from unmix.comparability import (
    DateWindow,
    check_date_count,
    circular_day_difference,
    closest_composite,
    day_of_year,
    day_of_year_window,
    median_composite,
    season_years,
    select_dates,
    warn_window,
    window_spread_days,
    year_groups,
)
from unmix.errors import EmptyWindowYearWarning, InputError, ShapeError, WindowSpreadWarning


def _dates(first: str, last: str, step: int) -> np.ndarray:
    return np.arange(np.datetime64(first), np.datetime64(last), step).astype("datetime64[D]")


def test_day_of_year_equals_python_datetime_including_leap_years():
    d = _dates("2003-11-01", "2009-03-01", 3)
    d = np.concatenate([d, np.array(["2004-12-31", "2008-12-31", "2005-12-31", "2008-02-29"], "datetime64[D]")])
    ref = [dt.date.fromisoformat(str(x)).timetuple().tm_yday for x in d]  # Python datetime
    assert day_of_year(d).tolist() == ref
    assert day_of_year(np.array(["2004-12-31"], "datetime64[D]"))[0] == 366  # leap year: Python datetime


def test_window_across_the_new_year_keeps_december_to_february():
    d = _dates("2003-01-01", "2009-01-01", 1)
    mask = day_of_year_window(day_of_year(d), 335, 60)
    # Python datetime: day of year >= 335 or <= 60 (Dec 1 in common years is day 335, Nov 30 in leap years)
    ref = [(t.timetuple().tm_yday >= 335) or (t.timetuple().tm_yday <= 60)
           for t in (dt.date.fromisoformat(str(x)) for x in d)]
    assert mask.tolist() == ref
    leap_dec31 = np.array(["2004-12-31"], "datetime64[D]")
    assert day_of_year_window(day_of_year(leap_dec31), 335, 60)[0]  # day 366 lies inside a wrapping window
    assert not day_of_year_window(day_of_year(leap_dec31), 1, 365)[0]  # ... and outside 1-365 (Python datetime)
    assert day_of_year_window(np.array([366]), 366, 1)[0] and day_of_year_window(np.array([1]), 366, 1)[0]


def test_window_without_wrap_is_inclusive():
    assert day_of_year_window(np.arange(1, 367), 100, 200).sum() == 101  # 100..200 inclusive: arithmetic


def test_season_years_follow_the_start_of_a_wrapping_season():
    d = np.array(["2009-12-01", "2010-01-15", "2010-02-28", "2010-12-02"], "datetime64[D]")
    assert season_years(d, (335, 60)).tolist() == [2009, 2009, 2009, 2010]  # Dec-Feb seasons by start year
    assert season_years(d).tolist() == [2009, 2010, 2010, 2010]  # calendar years (Python datetime .year)


def test_select_dates_names_why_each_date_is_left_out():
    d = np.array(["2004-12-30", "2005-01-10", "2005-06-01", "2006-01-05", "2009-12-15", "2012-03-01"],
                 "datetime64[D]")
    mask, why = select_dates(d, doy_window=(335, 60), years=[2004, 2009], date_range=("2005-01-01", "2011-12-31"))
    assert mask.tolist() == [False, True, False, False, True, False]
    assert why.tolist() == ["before 2005-01-01", "", "outside day-of-year window 335-60",
                            "season 2005/06 not selected", "", "after 2011-12-31"]
    mask, why = select_dates(d, years=[2005])
    assert why[0] == "year 2004 not selected" and why[3] == "year 2006 not selected" and mask[1] and mask[2]


def test_date_window_describes_itself_and_checks_its_settings():
    w = DateWindow(doy_window=(335, 60), years=(2006, 2005), date_range=("2005-01-01", None), max_spread_days=20)
    assert w.wraps and w.years == (2005, 2006)
    assert w.describe() == ("days of year 335-60 (across the new year), years 2005, 2006, "
                            "dates 2005-01-01 to end")
    for bad in ({"doy_window": (0, 60)}, {"doy_window": (10, 367)}, {"date_range": ("2006-01-01", "2005-01-01")},
                {"date_range": ("soon", None)}, {"max_spread_days": -1}):
        with pytest.raises(InputError):
            DateWindow(**bad)


def test_fewer_dates_than_needed_names_both_counts():
    with pytest.raises(InputError, match=r"selects 4 dates; the trend tests need at least 8"):
        check_date_count(4, 8)
    check_date_count(8, 8)


def test_year_groups_number_years_and_keep_empty_years():
    d = np.array(["2001-12-20", "2002-01-05", "2004-01-02", "2004-07-01"], "datetime64[D]")
    mask, _ = select_dates(d, doy_window=(335, 60))
    groups, years = year_groups(d, mask, DateWindow(doy_window=(335, 60)))
    assert years.tolist() == [2001, 2002, 2003]  # seasons 2001/02 .. 2003/04, 2002/03 without dates
    assert groups.tolist() == [0, 0, 2, -1]


def _random_record(seed, n_pix=40, n_time=30, nan_share=0.3):
    rng = np.random.default_rng(seed)
    values = rng.normal(size=(n_pix, n_time)).astype(np.float32)
    values[rng.random(values.shape) < nan_share] = np.nan
    groups = rng.integers(-1, 5, n_time)
    return values, groups


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_median_composite_equals_numpy_nanmedian_per_group(seed):
    values, groups = _random_record(seed)
    values[0] = np.nan  # a pixel without any data
    out, counts = median_composite(values, groups, n_groups=6)
    assert out.dtype == np.float32 and out.shape == (40, 6)
    for g in range(6):
        sel = values[:, groups == g]
        ref_count = np.isfinite(sel).sum(axis=1)
        np.testing.assert_array_equal(counts[:, g], ref_count)
        has = ref_count > 0
        with np.errstate(all="ignore"):
            ref = np.nanmedian(sel[has].astype(np.float64), axis=1) if has.any() else np.zeros(0)
        np.testing.assert_allclose(out[has, g], ref, rtol=1e-6)  # numpy.nanmedian
        assert np.isnan(out[~has, g]).all()


def test_median_composite_keeps_leading_axes_and_float64():
    values, groups = _random_record(3, n_pix=12)
    cube = values.astype(np.float64).reshape(3, 4, -1)
    out, counts = median_composite(cube, groups)
    assert out.shape == (3, 4, groups.max() + 1) and out.dtype == np.float64
    g = 1
    np.testing.assert_allclose(out[..., g], np.nanmedian(cube[..., groups == g], axis=-1))  # numpy.nanmedian


def _closest_reference(values, doy, groups, target, n_groups):
    """Brute force: for each pixel and group, numpy argmin of the circular distance among valid dates."""
    period = 365.2425
    out = np.full((values.shape[0], n_groups), np.nan)
    index = np.full((values.shape[0], n_groups), -1)
    for p in range(values.shape[0]):
        for g in range(n_groups):
            cand = np.flatnonzero((groups == g) & np.isfinite(values[p]))
            if cand.size == 0:
                continue
            diff = np.abs(doy[cand] - target) % period
            dist = np.minimum(diff, period - diff)
            best = cand[np.argmin(dist)]  # argmin returns the first minimum: the earlier date
            out[p, g], index[p, g] = values[p, best], best
    return out, index


@pytest.mark.parametrize("target", [1, 15, 200, 350, 366])
def test_closest_composite_equals_brute_force_circular_argmin(target):
    values, groups = _random_record(5, n_time=40)
    doy = np.random.default_rng(9).choice(np.r_[1:60, 300:367], 40).astype(float)
    out, counts, index = closest_composite(values, doy, groups, target, n_groups=5, return_index=True)
    ref, ref_index = _closest_reference(values.astype(np.float64), doy, groups, target, 5)
    np.testing.assert_array_equal(index, ref_index)
    np.testing.assert_allclose(out, ref, rtol=0, atol=0, equal_nan=True)
    np.testing.assert_array_equal(counts, [[np.isfinite(values[p, groups == g]).sum() for g in range(5)]
                                           for p in range(values.shape[0])])


def test_closest_composite_wraps_over_the_new_year():
    # day 362 is 5.24 days from day 2 across the new year; day 20 is 18 days away (arithmetic)
    out, _ = closest_composite(np.array([[1.0, 2.0]]), [362, 20], [0, 0], 2)
    assert out.tolist() == [[1.0]]
    assert circular_day_difference(362, 2) == pytest.approx(365.2425 - 360)


def test_composites_reject_bad_groups_and_targets():
    with pytest.raises(ShapeError):
        median_composite(np.zeros((2, 3)), [0, 1])
    with pytest.raises(InputError):
        closest_composite(np.zeros((2, 3)), [1, 2, 3], [0, 0, 0], 0)


def test_spread_is_zero_for_the_same_day_and_counts_days_across_the_new_year():
    same = np.array(["2001-03-01", "2002-03-01", "2003-03-01"], "datetime64[D]")
    assert window_spread_days(same, [True] * 3) == 0.0  # same day of year every (common) year
    across = np.array(["2001-12-27", "2003-01-04"], "datetime64[D]")  # days 361 and 4
    # days 361 and 4 lie 365.2425 - 357 = 8.24 days apart on the circle (arithmetic)
    assert window_spread_days(across, [True, True]) == pytest.approx(8.2425)


def test_spread_warning_and_empty_year_warning():
    w = DateWindow(doy_window=(100, 200), max_spread_days=30)
    with pytest.warns(WindowSpreadWarning, match="differ by 45 days"):
        warn_window(w, [2001, 2002], [3, 2], spread_days=45.0)
    with pytest.warns(EmptyWindowYearWarning, match="2002"):
        warn_window(w, [2001, 2002, 2003], [3, 0, 1], spread_days=10.0)
    warn_window(w, [2001], [1], spread_days=30.0)  # at the limit: no warning (UnmixWarning is an error here)


def test_kernel_module_imports_no_upper_layer():
    import subprocess
    import sys

    # house rule (DEVELOPERS.md): kernels import no xarray / dask / rasterio / click / matplotlib
    code = ("import sys, unmix.comparability.phenology; "
            "print(','.join(m for m in ('xarray', 'dask', 'rasterio', 'click', 'matplotlib') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
