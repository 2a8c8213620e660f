"""The date checks on a lazy cube, without the command line (unmix.cube.date_checks).

The record is a textured ground (smoothed noise per band) seen on ten September dates and one February
date, with sensor noise. One date is moved by a known sub-pixel shift with scipy.ndimage.shift, one date's
band is scaled by a known gain of 1.1.
"""

from __future__ import annotations

import dataclasses

import dask.array as da
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from conftest import spy_chunk_reads
from scipy import ndimage

from unmix.comparability import DateWindow
from unmix.cube.date_checks import MIN_DATES, CheckSettings, check_dates
from unmix.errors import ComparabilityWarning, InputError

DATES = [f"{y}-09-{d:02d}" for y, d in zip(range(2010, 2020), (3, 10, 5, 12, 1, 8, 4, 11, 6, 9))] + ["2014-02-15"]
SHIFTED, BRIGHT, OFF_SEASON = "2013-09-12", "2016-09-04", "2014-02-15"
SHIFT = (1.2, -0.9)  # pixels (y, x): 1.5 px
SEASON = DateWindow(doy_window=(230, 270))
SMALL = dict(block=64, n_blocks=4)  # 4 blocks of 64 px on the 128 px scene


def _record(sensors=None, size=128, seed=3):
    rng = np.random.default_rng(seed)
    ground = ndimage.gaussian_filter(rng.random((3, size, size)), (0, 1.5, 1.5)) * 0.5 + 0.05
    arr = np.empty((len(DATES), 3, size, size))
    for t, date in enumerate(DATES):
        seen = ground + rng.normal(0, 0.002, ground.shape)
        if date == SHIFTED:
            seen = ndimage.shift(seen, (0, *SHIFT), order=3, mode="nearest")
        if date == BRIGHT:
            seen[1] *= 1.1
        arr[t] = seen
    coords = {"time": pd.to_datetime(DATES), "band": ["B3", "B4", "B5"]}
    if sensors is not None:
        coords["sensor"] = ("time", sensors)
    cube = xr.DataArray(da.from_array(arr.astype(np.float32), chunks=(1, 3, 64, 64)), dims=("time", "band", "y", "x"),
                        coords=coords)
    return cube.sortby("time")


@pytest.fixture(scope="module")
def record():
    return _record()


@pytest.fixture(scope="module")
def checked(record):
    return check_dates(record, CheckSettings(window=SEASON, **SMALL), warn=False)


def _messages(checks):
    return checks.lines + [str(w) for w in checks.warnings] + [str(r) for r in checks.ledger["reason"].values]


def test_a_window_with_too_few_dates_says_how_many(record):
    with pytest.raises(InputError, match=rf"selects 1 dates; the trend tests need at least {MIN_DATES}"):
        check_dates(record, CheckSettings(window=DateWindow(doy_window=(30, 60))))


def test_shifted_date_left_out_with_its_reason(checked):
    ledger = checked.ledger
    row = ledger.sel(time=SHIFTED)
    # measured within 0.1 px of the shift applied with scipy.ndimage.shift (the aligning shift is its opposite),
    # left out above the default 0.5 px (Townshend et al. 1992 give 0.2 px as the level of concern)
    assert float(row.shift_y) == pytest.approx(-SHIFT[0], abs=0.1)
    assert float(row.shift_x) == pytest.approx(-SHIFT[1], abs=0.1)
    # (its radiometry, measured on misaligned pixels, may be flagged too: said after the reason)
    assert not bool(row.used) and str(row.reason.values).startswith("shifted 1.50 px (more than the 0.5 px allowed)")
    assert not bool(ledger.sel(time=OFF_SEASON).used) and "window" in str(ledger.sel(time=OFF_SEASON).reason.values)
    # every other date used, and the cube to unmix holds exactly those
    used = pd.to_datetime(checked.ledger.time.values[checked.ledger.used.values])
    assert sorted(set(DATES) - {SHIFTED, OFF_SEASON}) == [str(d.date()) for d in used]
    np.testing.assert_array_equal(checked.cube.time.values, used.values)
    # the bright band: gain maps the date onto the reference (reference = gain x date + offset): 1 / 1.1
    # (Canty & Nielsen 2008's method on a synthetic known gain)
    assert float(ledger.gain.sel(time=BRIGHT, band="B4")) == pytest.approx(1 / 1.1, rel=0.01)
    assert bool(ledger.sel(time=BRIGHT).used) and "gain departs" in str(ledger.sel(time=BRIGHT).reason.values)


def test_messages_name_no_command_line_option(checked, record):
    texts = _messages(checked)
    for settings in (CheckSettings(registration=False, radiometry=False),
                     CheckSettings(window=SEASON, exclude_radiometry=True, correct_shift=True, **SMALL)):
        texts += _messages(check_dates(record, settings, warn=False))
    assert texts and not [t for t in texts if "--" in t]
    assert any("the 0.5 px allowed" in t for t in checked.lines)
    # the settings a verdict or a warning speaks of are fields of CheckSettings (for the callers' hints)
    fields = {f.name for f in dataclasses.fields(CheckSettings)}
    named = {k for v in checked.verdicts for k in v.settings} | {k for w in checked.warnings for k in w.settings}
    assert named and named <= fields


def test_warnings_are_issued_or_handed_back(record, checked):
    assert [type(w) for w in checked.warnings] == [ComparabilityWarning]  # the bright date (the shifted one left out)
    assert BRIGHT in str(checked.warnings[0])
    with pytest.warns(ComparabilityWarning, match=BRIGHT):
        check_dates(record, CheckSettings(window=SEASON, **SMALL))


def test_flagged_radiometry_left_out_or_normalised(record):
    out = check_dates(record, CheckSettings(window=SEASON, exclude_radiometry=True, **SMALL), warn=False)
    row = out.ledger.sel(time=BRIGHT)
    assert not bool(row.used) and str(row.reason.values).startswith("radiometry departs (flagged dates left out)")
    norm = check_dates(record, CheckSettings(window=SEASON, normalise=True, **SMALL), warn=False)
    assert isinstance(norm.cube.data, da.Array)  # lazy until the caller computes it
    ref = record.sel(time=norm.ledger.attrs["reference_date"], band="B4").values
    fixed = norm.cube.sel(time=BRIGHT, band="B4").values
    # back on the reference's scale within the added noise (two dates of sd 0.002: difference sd 0.003)
    assert np.abs(fixed - ref).mean() < 0.004 < np.abs(record.sel(time=BRIGHT, band="B4").values - ref).mean()


def test_yearly_median_composites():
    t = pd.to_datetime([f"{y}-09-{d:02d}" for y in range(2010, 2019) for d in (2, 20)])
    values = np.random.default_rng(1).random((t.size, 2, 4, 4))
    values[3, :, 0, 0] = np.nan  # one missing observation: that year's value is the other date's
    cube = xr.DataArray(values, dims=("time", "band", "y", "x"), coords={"time": t, "band": ["red", "nir"]})
    out = check_dates(cube, CheckSettings(window=SEASON, composite="median", registration=False, radiometry=False))
    assert out.cube.sizes["time"] == 9 and out.lines[-1] == "composites: 9 yearly median composites of 18 dates"
    # numpy's nanmedian of each year's two dates
    expected = np.nanmedian(values.reshape(9, 2, 2, 4, 4), axis=1)
    np.testing.assert_allclose(out.cube.transpose("time", "band", "y", "x").values, expected)


def test_two_sensors_read_once_each_fitted_within_its_own():
    sensors = ["tm-like"] * 5 + ["oli-like"] * 5 + ["tm-like"]  # in the order of DATES
    record = _record(sensors)
    spied, calls = spy_chunk_reads(record)
    with dask_synchronous():
        out = check_dates(spied, CheckSettings(reference="2010-09-03", **SMALL), warn=False)
    # the 4 blocks of each of the 11 dates, read once for the shifts and the radiometry together (no window,
    # the reference given: nothing else reads the stack); dask's own count of the chunks is 4 per date
    assert len(calls) == 4 * 11 and spied.data.npartitions == 4 * 11
    line = next(v for v in out.lines if v.startswith("reference date"))
    assert "2 sensors" in line and "tm-like 2010-09-03" in line and "oli-like" in line
    # the bright date (an oli-like date) is still found against a date of its own sensor
    ledger = out.ledger
    assert float(ledger.gain.sel(time=BRIGHT, band="B4")) == pytest.approx(1 / 1.1, rel=0.01)


def dask_synchronous():
    import dask

    return dask.config.set(scheduler="synchronous")


def test_measured_on_a_cube_of_smaller_chunks_only(record, checked):
    # The same record in chunks of 128 px (as unmixing runs on) and of 64 px (one "tile" per block): the
    # checks read only the small-chunk cube, one chunk per block and date, and find what they find on the
    # record itself (the ledger of the fixture `checked`, measured on 64 px chunks)
    large = record.chunk({"y": 128, "x": 128})
    large_spied, large_calls = spy_chunk_reads(large)
    small_spied, small_calls = spy_chunk_reads(record)
    checks = check_dates(large_spied, CheckSettings(window=SEASON, **SMALL), warn=False, measure_on=small_spied)
    assert not large_calls  # nothing of the unmixing cube is read
    kept = int((~checked.ledger.reason.str.contains("window")).sum())
    assert len(small_calls) == 4 * kept and all(shape[-2:] == (64, 64) for shape in small_calls)
    xr.testing.assert_identical(checks.ledger, checked.ledger)
    assert checks.cube.chunks == large.sel(time=checks.cube.time).chunks  # unmixing keeps its own chunks


def test_a_measuring_cube_of_another_stack_is_refused(record):
    from unmix.errors import ShapeError

    with pytest.raises(ShapeError, match="time"):
        check_dates(record, CheckSettings(**SMALL), measure_on=record.isel(time=slice(1, None)))


def test_resampled_dates_are_named_in_the_verdict(record):
    checks = check_dates(record, CheckSettings(window=SEASON, correct_shift=True, **SMALL), warn=False)
    line = next(v for v in checks.lines if v.startswith("co-registration"))
    # the 1.5 px date (shifted with scipy.ndimage.shift) is resampled, kept and named as such
    assert "1 date(s) shifted more than 0.2 px, resampled by their measured shift: " + SHIFTED in line
    assert bool(checks.ledger.sel(time=SHIFTED).used) and SHIFTED in [str(t)[:10] for t in checks.cube.time.values]


def test_normalising_keeps_a_date_without_a_fit_as_it_is(record):
    # one September date almost all missing: too few pixels for IR-MAD; normalising leaves it as it is and
    # says so in the ledger, instead of turning it into no data
    gappy_date = "2017-09-11"
    values = record.values.copy()
    k = list(pd.to_datetime(record.time.values).strftime("%Y-%m-%d")).index(gappy_date)
    values[k, :, 6:, :] = np.nan
    cube = record.copy(data=da.from_array(values, chunks=(1, 3, 64, 64)))
    checks = check_dates(cube, CheckSettings(window=SEASON, normalise=True, **SMALL), warn=False)
    reason = str(checks.ledger.sel(time=gappy_date).reason.values)
    assert "too few" in reason and "not normalised (no fit)" in reason and bool(checks.ledger.sel(time=gappy_date).used)
    np.testing.assert_array_equal(checks.cube.sel(time=gappy_date).values, values[k])
    assert any("unmixed as they are" in line for line in checks.lines)
