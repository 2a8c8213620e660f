"""Tests of unmix.trend.fdr (false discovery rate adjustment, Benjamini-Hochberg / -Yekutieli).

References used: the worked example of Benjamini & Hochberg (1995), scipy.stats.false_discovery_control
and statsmodels.stats.multitest.multipletests.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from unmix.errors import InputError, UnknownNameError
from unmix.trend import fdr

# ---------------------------------------------------------------------------------------------
# FDR
# ---------------------------------------------------------------------------------------------
BH_P = np.array([0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240,
                 0.4262, 0.5719, 0.6528, 0.7590, 1.000])


def test_fdr_benjamini_hochberg_1995_example():
    # Benjamini & Hochberg (1995) worked example (CHECKS.md): BH rejects 4 at q = 0.05
    reject, adj = fdr(BH_P, 0.05)
    assert reject.sum() == 4 and reject[:4].all()
    expected = [0.0015, 0.003, 0.0095, 0.035625, 0.0603, 0.063857, 0.063857, 0.0645, 0.0765,
                0.486, 0.581182, 0.714875, 0.753231, 0.813214, 1]
    np.testing.assert_allclose(adj, expected, atol=1e-6)


@pytest.mark.parametrize("method", ["bh", "by"])
def test_fdr_matches_scipy_and_statsmodels(method):
    # scipy.stats.false_discovery_control (adjusted) and statsmodels multipletests (reject) on the
    # valid values of a 3-d map with NaN
    rng = np.random.default_rng(9)
    for _ in range(20):
        p = rng.uniform(size=(3, 7, 9)) ** rng.uniform(1, 6)
        p[rng.random(p.shape) < 0.2] = np.nan
        q = rng.uniform(0.01, 0.2)
        reject, adj = fdr(p, q, method=method)
        ok = ~np.isnan(p)
        np.testing.assert_allclose(adj[ok], stats.false_discovery_control(p[ok], method=method),
                                   rtol=1e-12)
        sm = multipletests(p[ok], alpha=q, method="fdr_bh" if method == "bh" else "fdr_by")
        np.testing.assert_array_equal(reject[ok], sm[0])
        assert not reject[~ok].any() and np.isnan(adj[~ok]).all()


def test_fdr_bad_arguments():
    with pytest.raises(InputError, match="q"):
        fdr(BH_P, q=5)
    with pytest.raises(InputError, match="p-values"):
        fdr([0.5, 1.5])
    with pytest.raises(UnknownNameError, match="bh"):
        fdr(BH_P, method="bonferroni")
