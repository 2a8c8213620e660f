"""Tests of unmix.cube.extraction: valid pixel-dates drawn from a (time, band, y, x) stack, numpy or
dask-backed, and endmembers extracted from them with their date, row and column.

The stack is a linear mixture with Dirichlet(1, 1, 1) abundances of random smooth spectra, one pure
pixel per endmember at a known (date, row, column), and NaN (clouds) over part of one date.
"""

from __future__ import annotations

import numpy as np
import pytest
from _extraction_helpers import smooth_spectra

from unmix.cube.extraction import extract_from_stack, sample_stack
from unmix.errors import ShapeError

# ------------------------------------------------------------------------------------------------
# stacks
# ------------------------------------------------------------------------------------------------


def _stack_with_pure_pixels(rng):
    em = smooth_spectra(3, 8, rng)
    nt, ny, nx = 4, 12, 10
    a = rng.dirichlet(np.ones(3), (nt, ny, nx))
    cube = np.einsum("tyxk,kb->tbyx", a, em).astype(np.float32)
    where = [(2, 3, 4), (0, 11, 0), (3, 5, 9)]  # (t, y, x) of the pure pixel of each endmember
    for k, (t, y, x) in enumerate(where):
        cube[t, :, y, x] = em[k]
    cube[1, :, :6, :] = np.nan  # clouds over part of date 1
    cube[0, 2, 0, 0] = np.nan
    return cube, em, where


@pytest.mark.parametrize("method", ["vca", "nfindr", "atgp", "ppi"])
def test_stack_extraction_reports_dates_and_positions(method):
    rng = np.random.default_rng(0)
    cube, em, where = _stack_with_pure_pixels(rng)
    dates = np.array(["2020-03-01", "2020-06-01", "2020-09-01", "2020-12-01"], dtype="datetime64[D]")
    r = extract_from_stack(cube, 3, method=method, seed=0, sample_size=None, dates=dates)
    got = sorted(zip(r.time_index.tolist(), r.y.tolist(), r.x.tolist()))
    assert got == sorted(where)
    for k in range(3):
        np.testing.assert_array_equal(cube[r.time_index[k], :, r.y[k], r.x[k]], r.spectra[k])
        assert r.dates[k] == dates[r.time_index[k]]
    assert r.n_sampled == np.isfinite(cube).all(axis=1).sum()


def test_stack_sample_dask_equals_numpy_and_skips_nan():
    da = pytest.importorskip("dask.array")
    rng = np.random.default_rng(1)
    cube, _, _ = _stack_with_pure_pixels(rng)
    lazy = da.from_array(cube, chunks=(1, 8, 5, 5))
    a = sample_stack(cube, sample_size=200, seed=3)
    b = sample_stack(lazy, sample_size=200, seed=3)
    assert a.pixels.shape == (200, 8) and np.isfinite(a.pixels).all()
    np.testing.assert_array_equal(a.pixels, b.pixels)
    np.testing.assert_array_equal(a.time_index, b.time_index)
    np.testing.assert_array_equal(cube[a.time_index, :, a.y, a.x], a.pixels)
    # all distinct pixel-dates
    assert len(set(zip(a.time_index.tolist(), a.y.tolist(), a.x.tolist()))) == 200


def test_stack_sample_fills_up_despite_nan():
    # 90 % of the pixel-dates are NaN: the sampler must draw again until it holds sample_size.
    cube = np.full((5, 3, 40, 40), np.nan, dtype=np.float32)
    rng = np.random.default_rng(0)
    mask = rng.random((5, 40, 40)) < 0.1
    cube[:, :, :, :] = np.where(mask[:, None], 0.2, np.nan)
    s = sample_stack(cube, sample_size=500, seed=0)
    assert s.pixels.shape[0] == 500 and np.isfinite(s.pixels).all()
    s_all = sample_stack(cube, sample_size=None)
    assert s_all.pixels.shape[0] == mask.sum()


def test_bad_input():
    with pytest.raises(ShapeError, match="time, band, y, x"):
        extract_from_stack(np.ones((3, 4, 5)), 2)
    with pytest.raises(ShapeError, match="dates"):
        extract_from_stack(np.ones((2, 3, 4, 5)), 2, dates=["2020-01-01"])
