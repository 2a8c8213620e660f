"""Co-registration on a scene whose cover really changes: the invented demo scene (unmix.demo.scenario).

Smooth zones, sensor noise, clouds (NaN) and real change (a centre-pivot disc cleared, sand advancing,
a paddock recovering): a registered record must measure below the warning level on every date, or say
why it could not be measured; a date shifted by a known amount must be recovered.
"""

from __future__ import annotations

import dask.array as da
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import ndimage

from unmix.comparability import WARN_SHIFT
from unmix.cube.comparability import measure_registration, reference_date, registration_verdict
from unmix.demo.scenario import ENDMEMBERS, make_scenario
from unmix.io.library import read_library, shipped_library_path
from unmix.sensors.roles import DEFAULT_ROLES, bands_for_roles
from unmix.spectra import resample

SHIFT = (1.5, -0.7)  # features of one date moved by scipy.ndimage.shift


def _demo_cube(arr: np.ndarray, dates, bands) -> xr.DataArray:
    # the stack reader's layout: (time, band, y, x), one chunk per date
    return xr.DataArray(da.from_array(arr, chunks=(1, -1, -1, -1)), dims=("time", "band", "y", "x"),
                        coords={"time": pd.DatetimeIndex(dates), "band": bands})


@pytest.fixture(scope="module")
def scene():
    """The demo scene (160 px of 30 m, 40 dates over ten years) with one date moved by SHIFT."""
    bands = bands_for_roles("landsat-8-oli", DEFAULT_ROLES)
    library = read_library(shipped_library_path("demo_library")).select(list(ENDMEMBERS))
    spectra = resample(library, "landsat-8-oli", bands).spectra  # as unmix.demo.run does
    sc = make_scenario(spectra)
    registered = _demo_cube(sc.reflectance, sc.dates, bands)
    i_ref = int(np.flatnonzero(registered.time.values == reference_date(registered))[0])
    moved_date = (i_ref + 8) % len(sc.dates)  # a date after the pivot was cleared: real change as well
    arr = sc.reflectance.copy()
    plane = arr[moved_date].astype(np.float64)
    holes = ndimage.shift(np.isnan(plane).astype(float), (0, *SHIFT), order=1, mode="nearest") > 1e-6
    moved = ndimage.shift(np.nan_to_num(plane, nan=float(np.nanmean(plane))), (0, *SHIFT), order=3, mode="nearest")
    moved[holes] = np.nan  # clouds move with the ground; pixels they touched stay missing
    arr[moved_date] = moved.astype(np.float32)
    cube = _demo_cube(arr, sc.dates, bands)
    return cube, moved_date, measure_registration(cube, band=None, reference=None)


def test_registered_dates_measure_below_the_warning_level(scene):
    cube, moved_date, res = scene
    others = np.arange(cube.sizes["time"]) != moved_date
    size = np.hypot(res.shift_y.values, res.shift_x.values)[others]
    failed = (res.reason.values != "")[others]
    # Townshend et al. (1992): about 0.2 px keeps change error under 10 %; a registered date must stay
    # below it or be flagged with its reason, never given a made-up shift
    assert np.all((size < WARN_SHIFT) | failed)
    assert np.all(np.isnan(size[failed]))
    assert failed.sum() == 0  # every band together measures all 39 dates of this scene (none fails)
    assert set(registration_verdict(res).values[others]) == {"ok"}


def test_shifted_date_recovered_and_excluded(scene):
    cube, moved_date, res = scene
    # the aligning shift is minus the one applied with scipy.ndimage.shift (this package's convention);
    # within 0.1 px (the target on this scene)
    assert res.shift_y.values[moved_date] == pytest.approx(-SHIFT[0], abs=0.1)
    assert res.shift_x.values[moved_date] == pytest.approx(-SHIFT[1], abs=0.1)
    assert registration_verdict(res).values[moved_date] == "exclude"  # 1.66 px > 0.5 px default


def test_faint_band_alone_is_flagged_not_invented(scene):
    cube, moved_date, _ = scene
    # the near-infrared alone: green vegetation, dry vegetation and sand differ there by about 0.02 of
    # reflectance on this scene, a few times the noise; dates are either measured below the warning
    # level or flagged with the reason (an imprecise or weak correlation peak)
    res = measure_registration(cube, band="B5", reference=None)
    others = np.arange(cube.sizes["time"]) != moved_date
    size = np.hypot(res.shift_y.values, res.shift_x.values)[others]
    reasons = res.reason.values[others]
    failed = reasons != ""
    assert np.all((size < WARN_SHIFT) | failed)
    assert all("correlation peak" in r for r in reasons[failed])
    assert set(registration_verdict(res).values[others][failed]) <= {"failed"}
