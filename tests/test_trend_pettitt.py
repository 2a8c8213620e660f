"""Tests of unmix.trend.pettitt (Pettitt 1979 change-point test).

References used: the value in ../shared/CHECKS.md and a slow obvious implementation below.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from _trend_helpers import _series_with_ties_and_nans

from unmix.trend import pettitt


# ---------------------------------------------------------------------------------------------
# Pettitt
# ---------------------------------------------------------------------------------------------
def _pettitt_reference(x):
    # slow obvious implementation of Pettitt (1979): U_t by the double sum, first argmax
    n = x.size
    u = [sum(np.sign(x[i] - x[j]) for i in range(t) for j in range(t, n)) for t in range(1, n)]
    k = max(abs(v) for v in u)
    t = int(np.argmax(np.abs(u)))  # index of the last value before the change
    return k, t, min(1.0, 2 * math.exp(-6 * k**2 / (n**3 + n**2)))


def test_pettitt_step_checks_md():
    # CHECKS.md (computed): ten values then ten higher -> K = 100 at t = 10 (index 9), p ~ 0.00158
    r = pettitt(np.r_[np.full(10, 0.2), np.full(10, 0.5)])
    assert r.k == 100
    assert r.index == 9
    assert r.p_value == pytest.approx(0.00158, abs=5e-6)


def test_pettitt_matches_reference_with_nans_on_original_axis():
    rng = np.random.default_rng(8)
    y = _series_with_ties_and_nans(rng, 120, 22, min_valid=3)
    y[:, 11:] += rng.normal(0, 1.5, (120, 1))  # some steps
    res = pettitt(y)
    for r in range(120):
        ok = np.flatnonzero(~np.isnan(y[r]))
        k, t, p = _pettitt_reference(y[r, ok])
        assert res.k[r] == k
        assert res.p_value[r] == pytest.approx(p, rel=1e-12)
        if k > 0:
            assert res.index[r] == ok[t]  # position on the ORIGINAL time axis
    assert np.isnan(pettitt(np.ones(6)).index)  # K = 0: no change point (documented)
    assert np.isnan(pettitt([1.0, np.nan, 2.0]).k)
