"""Radiometry within each sensor of a record, from the one read of the registration blocks (unmix.cube.radiometry).

The record is a textured ground (smoothed noise per band) seen by two invented sensors on three dates each:
the second sensor's bands read the ground with other gains and offsets (sensors differ by design), and one
of its dates has one band scaled by a known gain of 1.1.
"""

from __future__ import annotations

import dask
import dask.array as da
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from conftest import spy_chunk_reads
from scipy import ndimage

from unmix.cube.comparability import measure_comparability, measure_registration
from unmix.cube.radiometry import date_groups, fit_sample
from unmix.errors import InputError

SENSORS = ["tm-like"] * 3 + ["oli-like"] * 3
TIMES = pd.date_range("2015-01-01", periods=6, freq="YS")
BRIGHT, BAND = 5, "B4"  # the date and band scaled by 1.1
REFERENCE = "2016-01-01"  # the user's reference (a tm-like date)
SETTINGS = dict(n_blocks=4, block=64, upsample=20, sample=6000)


def _record(size=192, chunk=64, seed=2):
    rng = np.random.default_rng(seed)
    ground = ndimage.gaussian_filter(rng.random((3, size, size)), (0, 1.5, 1.5)) * 0.5 + 0.05
    arr = np.empty((6, 3, size, size))
    for t, sensor in enumerate(SENSORS):
        seen = ground if sensor == "tm-like" else ground * np.array([0.9, 1.15, 1.05])[:, None, None] + 0.01
        arr[t] = seen + rng.normal(0, 0.001, seen.shape)
    arr[BRIGHT, 1] *= 1.1
    arr[3, :, :8, :] = np.nan  # a few rows missing on the first oli-like date: the fourth has more valid pixels
    data = da.from_array(arr.astype(np.float32), chunks=(1, 3, chunk, chunk))
    return xr.DataArray(data, dims=("time", "band", "y", "x"),
                        coords={"time": TIMES, "band": ["B3", BAND, "B5"], "sensor": ("time", SENSORS)})


@pytest.fixture(scope="module")
def record():
    return _record()


@pytest.fixture(scope="module")
def measured(record):
    return measure_comparability(record, band=None, reference=REFERENCE, by="sensor", **SETTINGS)


def test_each_sensor_is_fitted_against_a_date_of_its_own(record, measured):
    _, fits = measured
    refs = pd.to_datetime(fits["reference"].values)
    sensor_of = dict(zip(TIMES, SENSORS))
    assert [sensor_of[r] for r in refs] == SENSORS
    # the user's reference serves its own sensor; the other sensor's date with most valid pixels (the first
    # oli-like date lacks 8 rows, counted by hand) serves the other
    assert list(fits["reference"].values) == [REFERENCE] * 3 + ["2019-01-01"] * 3
    assert fits.attrs["grouped_by"] == "sensor" and fits.attrs["reference"] == REFERENCE
    # every date fitted cleanly except the bright one
    flags = [str(f) for f in fits["flag"].values]
    assert [bool(f) for f in flags] == [t == BRIGHT for t in range(6)], flags


def test_known_gain_is_recovered_within_its_sensor(measured):
    _, fits = measured
    # one band of one date scaled by 1.1 (a synthetic known gain); the fit maps the date onto its reference
    # (reference = gain x date + offset), so the gain is 1 / 1.1; Canty & Nielsen (2008)'s method, 1 % target
    bright = fits.isel(time=BRIGHT)
    assert float(bright.gain.sel(band=BAND)) == pytest.approx(1 / 1.1, rel=0.01)
    assert float(bright.offset.sel(band=BAND)) == pytest.approx(0.0, abs=0.005)
    np.testing.assert_allclose(bright.gain.sel(band=["B3", "B5"]), 1.0, rtol=0.01)
    # every other date of either sensor: gain 1 within 1 %, as generated (only the sensors' bands differ)
    others = fits.drop_isel(time=BRIGHT)
    np.testing.assert_allclose(others.gain, 1.0, rtol=0.01)
    assert "gain departs" in str(bright.flag.values)


def test_one_read_equals_separate_measures_of_each_sensor(record, measured):
    shifts, fits = measured
    # the shifts: the registration alone over every date (the same blocks and kernel)
    alone = measure_registration(record, band=None, reference=REFERENCE, n_blocks=4, block=64, upsample=20)
    np.testing.assert_array_equal(shifts.shift_y.values, alone.shift_y.values)
    np.testing.assert_array_equal(shifts.shift_x.values, alone.shift_x.values)
    # the radiometry: each sensor's dates measured on their own against the same reference date draw the
    # same blocks and the same sampled pixels, so they must give the same fits
    for sensor, ref in (("tm-like", REFERENCE), ("oli-like", "2019-01-01")):
        part = record.isel(time=np.flatnonzero(np.array(SENSORS) == sensor))
        _, own = measure_comparability(part, band=None, reference=ref, **SETTINGS)
        for k in ("gain", "offset", "r2", "n"):
            np.testing.assert_allclose(fits[k].sel(time=part.time).values, own[k].values, rtol=1e-9)


def test_the_blocks_are_read_once_for_both_measures(record):
    spied, calls = spy_chunk_reads(record)
    with dask.config.set(scheduler="synchronous"):
        measure_comparability(spied, band="B5", reference=REFERENCE, by="sensor", **SETTINGS)
    # 4 blocks of 64 px, each inside one chunk of 64 px: 4 chunks on each of the 6 dates, once (dask's own
    # count of the cube's chunks: 9 per date); a second read for the radiometry would add chunks
    assert len(calls) == 4 * 6
    assert spied.data.npartitions == 9 * 6


def test_a_date_alone_in_its_group_is_flagged_not_fitted(record):
    values = np.random.default_rng(0).random((6, 500, 3))
    labels = record.assign_coords(sensor=("time", ["a"] * 5 + ["b"]))
    fits = fit_sample(labels, values, 0, by="sensor", min_pixels=10)
    assert "only date of its sensor" in str(fits.flag.values[5]) and np.isnan(fits.gain.values[5]).all()
    assert fits["reference"].values[5] == ""


def test_unknown_group_coordinate_names_the_known_ones(record):
    with pytest.raises(InputError, match=r"'platform'.*sensor"):
        date_groups(record, "platform")


@pytest.mark.parametrize("memory, reads", [(1 << 30, 1), (0, 2)])
def test_reference_from_the_blocks_read_once_within_the_memory_allowed(record, memory, reads):
    # No reference given: the date with most valid pixel-bands inside the measured blocks, counted here by
    # hand with numpy on the same windows; the blocks are kept while it is chosen when they fit in
    # ``memory`` (read once), else counted and read again (twice)
    from unmix.cube.comparability import block_layout

    gappy = record.copy(data=record.data.copy())
    gappy[:, :, 40:60, :] = np.nan  # rows through the first blocks, more on some dates than others
    gappy[4, :, 40:80, :] = np.nan
    gappy[1, :, 50:60, 100:] = np.nan
    gappy[0, :, 40:60, :30] = 0.2  # the first date fills part of the gap: the most valid date
    windows = block_layout(gappy, SETTINGS["n_blocks"], SETTINGS["block"])
    values = gappy.values
    by_hand = [sum(int(np.isfinite(values[t][:, wy, wx]).sum()) for wy, wx in windows) for t in range(6)]
    spied, calls = spy_chunk_reads(gappy)
    with dask.config.set(scheduler="synchronous"):
        shifts, fits = measure_comparability(spied, band=None, reference=None, memory=memory, **SETTINGS)
    assert shifts.attrs["reference_index"] == int(np.argmax(by_hand)) == 0
    assert shifts.attrs["reference"] == "2015-01-01" and fits.attrs["reference_index"] == 0
    assert shifts.shift_y.values[0] == 0 and fits.gain.values[0].tolist() == [1.0, 1.0, 1.0]
    assert len(calls) == reads * 4 * 6  # 4 blocks, each inside one chunk, on 6 dates


def test_values_outside_the_plausible_range_are_no_data_in_the_blocks(record):
    # Reflectance stored as integers (x 10 000) with an undeclared fill value 32767 over part of the scene:
    # the measures see those pixels as missing; the valid share of each date's blocks equals a count by hand
    from unmix.cube.comparability import block_layout

    scaled = np.round(np.nan_to_num(record.values, nan=3.2767) * 10000).astype(np.int16)  # gaps: the fill value
    scaled[:, :, 10:40, 20:90] = 32767
    cube = record.copy(data=da.from_array(scaled, chunks=(1, 3, 64, 64)))
    windows = block_layout(cube, SETTINGS["n_blocks"], SETTINGS["block"])
    plausible = (scaled >= -5000) & (scaled <= 20000)
    by_hand = [np.mean(np.concatenate([plausible[t][:, wy, wx].all(axis=0).ravel() for wy, wx in windows]))
               for t in range(6)]
    shifts, _ = measure_comparability(cube, band=None, reference=REFERENCE, valid_range=(-5000, 20000), **SETTINGS)
    np.testing.assert_allclose(shifts.valid_share.values, by_hand, rtol=1e-6)
    assert min(by_hand) < 0.95  # the fill value lies in the blocks
