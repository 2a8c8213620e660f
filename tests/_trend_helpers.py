"""Shared data and generators for the tests of unmix.trend (tests/test_trend_*.py)."""

from __future__ import annotations

import numpy as np

HOLY_CROSS = np.array([12.9, 14.8, 13.2, 15.7, 13.8, 15.6, 12.9, 11.0, 17.3, 15.9, 19.0, 18.3,
                       20.1, 21.7])


def _series_with_ties_and_nans(rng, n_series, n_time, min_valid, nan_frac=0.15, decimals=1):
    """AR(1)-ish series with a random trend, rounded (ties) and with NaN gaps."""
    e = rng.standard_normal((n_series, n_time))
    for k in range(1, n_time):
        e[:, k] += 0.4 * e[:, k - 1]
    slope = rng.normal(0, 0.08, (n_series, 1))
    y = np.round(e + slope * np.arange(n_time), decimals)
    mask = rng.random((n_series, n_time)) < nan_frac
    # keep at least min_valid valid values in every series
    for r in range(n_series):
        while (~mask[r]).sum() < min_valid:
            mask[r, rng.integers(n_time)] = False
    y[mask] = np.nan
    return y


def _ar1(rng, n_series, n, phi):
    """AR(1) noise with unit marginal variance, started from the stationary distribution."""
    x = np.empty((n_series, n))
    x[:, 0] = rng.standard_normal(n_series)
    for k in range(1, n):
        x[:, k] = phi * x[:, k - 1] + np.sqrt(1 - phi**2) * rng.standard_normal(n_series)
    return x
