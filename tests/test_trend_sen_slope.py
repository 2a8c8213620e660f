"""Tests of unmix.trend.sen_slope (Sen 1968 slope with its confidence interval).

References used: the worked example in ../shared/CHECKS.md and scipy.stats.theilslopes.
"""

from __future__ import annotations

import numpy as np
import pytest
from _trend_helpers import HOLY_CROSS, _series_with_ties_and_nans
from scipy import stats

from unmix.errors import InputError
from unmix.trend import sen_slope


# ---------------------------------------------------------------------------------------------
# Sen slope
# ---------------------------------------------------------------------------------------------
def test_sen_slope_holy_cross():
    # CHECKS.md (computed; identical to scipy.stats.theilslopes): 0.566667, CI [0.325, 0.866667]
    r = sen_slope(HOLY_CROSS)
    assert r.slope == pytest.approx(0.566667, abs=1e-6)
    assert r.low == pytest.approx(0.325, abs=1e-6)
    assert r.high == pytest.approx(0.866667, abs=1e-6)


@pytest.mark.parametrize("confidence", [0.95, 0.9, 0.99])
def test_sen_slope_matches_scipy_theilslopes(confidence):
    # scipy.stats.theilslopes(y, t, alpha=confidence) on the valid values, irregular tied times,
    # tied values (one decimal) and NaN gaps; slope, intercept and interval must agree
    rng = np.random.default_rng(int(confidence * 100))
    nt = 25
    t = 2000 + np.sort(rng.choice(np.arange(0, 12, 0.25), nt))
    y = _series_with_ties_and_nans(rng, 300, nt, min_valid=2, nan_frac=0.3)
    y[:5, :-2] = np.nan  # a few two-value series
    res = sen_slope(y, t, confidence=confidence)
    for r in range(y.shape[0]):
        ok = ~np.isnan(y[r])
        if np.unique(t[ok]).size < 2:
            assert np.isnan(res.slope[r])
            continue
        ref = stats.theilslopes(y[r, ok], t[ok], alpha=confidence)
        np.testing.assert_allclose(
            [res.slope[r], res.intercept[r], res.low[r], res.high[r]],
            [ref.slope, ref.intercept, ref.low_slope, ref.high_slope], rtol=1e-10, atol=1e-9,
            err_msg=f"series {r}")


def test_sen_slope_properties_and_dtype():
    rng = np.random.default_rng(7)
    y = _series_with_ties_and_nans(rng, 40, 18, min_valid=4).astype(np.float32)
    t = np.linspace(2001.0, 2018.5, 18)
    r = sen_slope(y, t)
    assert r.slope.dtype == np.float32 and r.low.dtype == np.float32  # float32 stays float32
    # reversing the series flips slope sign and swaps the interval (property)
    rr = sen_slope(y[:, ::-1], t)
    np.testing.assert_allclose(rr.slope, -r.slope, rtol=1e-6)
    np.testing.assert_allclose(rr.low, -r.high, rtol=1e-6)
    # NaN positions keep their time: same as the compacted series with its own times
    for k in range(0, 40, 9):
        ok = ~np.isnan(y[k])
        one = sen_slope(y[k][ok], t[ok])
        assert (one.slope, one.low, one.high) == (r.slope[k], r.low[k], r.high[k])
    # 3-d equals one by one
    y3 = y.reshape(4, 10, 18)
    r3 = sen_slope(y3, t)
    np.testing.assert_array_equal(r3.slope.reshape(-1), r.slope)
    with pytest.raises(InputError, match="confidence level"):
        sen_slope(y, t, confidence=0.05)
