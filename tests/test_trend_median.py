"""Tests of the private selection / median kernels (unmix.trend._median_numba) behind the Sen slopes.

References used: numpy (sort, median) on many generated cases (hypothesis).
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 6), min_size=1, max_size=80), st.data())
def test_private_select_matches_sort(vals, data):
    # the quickselect behind the Sen medians of the corrections, against numpy's sort
    from unmix.trend._median_numba import _select

    a = np.asarray(vals, float)
    k = data.draw(st.integers(0, a.size - 1))
    b = a.copy()
    _select(b, 0, b.size, k, np.empty(b.size))
    assert b[k] == np.sort(a)[k]
    assert (b[:k] <= b[k]).all() and (b[k + 1:] >= b[k]).all()


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 900), st.integers(0, 2**32 - 1), st.sampled_from([2, 10, 1000, 0]))
def test_private_median_band_matches_numpy_median(m, seed, levels):
    # the sampled-band median behind the Sen slopes of the corrections, against numpy.median;
    # few distinct levels (many ties), sorted and reversed inputs exercise the fallback path
    from unmix.trend._median_numba import _median_band

    rng = np.random.default_rng(seed)
    a = rng.integers(0, levels, m).astype(float) if levels else rng.standard_normal(m)
    for b in (a, np.sort(a), np.sort(a)[::-1].copy()):
        assert _median_band(b.copy(), m, np.empty(m)) == np.median(b)


@settings(max_examples=60, deadline=None)
@given(st.integers(127, 900), st.integers(0, 2**32 - 1), st.sampled_from([2, 10, 1000, 0]),
       st.floats(-3, 3), st.floats(0, 3))
def test_private_median_band_hint_matches_numpy_median(m, seed, levels, centre, half):
    # the median with a band hint (from a previous median; it may miss, be too wide or NaN)
    # against numpy.median
    from unmix.trend._median_numba import _median_band_hint

    rng = np.random.default_rng(seed)
    a = rng.integers(0, levels, m).astype(float) if levels else rng.standard_normal(m)
    if levels:
        centre, half = (centre + 3) * levels / 6, half * levels / 6
    for lo, hi in ((centre - half, centre + half), (np.nan, np.nan)):
        med, _, _ = _median_band_hint(a.copy(), m, np.empty(m), lo, hi)
        assert med == np.median(a)


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 900), st.integers(0, 2**32 - 1), st.sampled_from([3, 1000, 0]),
       st.floats(-2, 2), st.floats(0, 2))
def test_private_median_within_matches_order_statistics(m, seed, levels, centre, half):
    # True exactly when both middle order statistics (numpy's sort) lie in [lo, hi]; with the
    # number of values in the band
    from unmix.trend._median_numba import _median_within

    rng = np.random.default_rng(seed)
    a = rng.integers(0, levels, m).astype(float) if levels else rng.standard_normal(m)
    lo, hi = centre - half, centre + half
    srt = np.sort(a)
    mid = srt[[(m - 1) // 2, m // 2]]
    within, n_band = _median_within(a, m, lo, hi)
    assert within == bool(((mid >= lo) & (mid <= hi)).all())
    assert n_band == np.count_nonzero((a >= lo) & (a <= hi))  # values in the band, by numpy
    if within:
        assert lo <= np.median(a) <= hi
