"""Tests of unmix.accuracy.fractions: agreement of estimated and reference fractions.

References: numpy formulas of MAE, RMSE and bias (Willmott & Matsuura 2005, doi:10.3354/cr030079), and
scipy.stats.linregress for the least-squares line and its r^2.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import linregress

from unmix.accuracy import fraction_agreement
from unmix.errors import ShapeError


def test_agreement_against_numpy_and_scipy():
    rng = np.random.default_rng(2)
    ref = rng.dirichlet([2, 2, 1], size=80)
    est = np.clip(ref + rng.normal(0.02, 0.05, ref.shape), 0, 1)
    est[3, 1] = np.nan  # no data: left out of that endmember only
    t = fraction_agreement(est, ref, endmembers=["gv", "npv", "soil"])
    for j, name in enumerate(["gv", "npv", "soil"]):
        ok = np.isfinite(est[:, j])
        d = est[ok, j] - ref[ok, j]
        assert t.loc[name, "n"] == ok.sum()
        assert t.loc[name, "mae"] == pytest.approx(np.abs(d).mean(), rel=1e-12)
        assert t.loc[name, "rmse"] == pytest.approx(np.sqrt((d ** 2).mean()), rel=1e-12)
        assert t.loc[name, "bias"] == pytest.approx(d.mean(), rel=1e-12)
        fit = linregress(ref[ok, j], est[ok, j])  # scipy as the outside reference
        assert t.loc[name, "r2"] == pytest.approx(fit.rvalue ** 2, rel=1e-10)
        assert t.loc[name, "slope"] == pytest.approx(fit.slope, rel=1e-10)
        assert t.loc[name, "intercept"] == pytest.approx(fit.intercept, rel=1e-10, abs=1e-12)
        sst = ((ref[ok, j] - ref[ok, j].mean()) ** 2).sum()
        assert t.loc[name, "r2_identity"] == pytest.approx(1 - (d ** 2).sum() / sst, rel=1e-12)
    assert t.loc["npv", "n"] == 79


def test_perfect_and_biased_estimates():
    ref = np.linspace(0, 1, 11)
    t = fraction_agreement(ref, ref)
    assert t["mae"].iloc[0] == 0 and t["r2"].iloc[0] == pytest.approx(1) and t["r2_identity"].iloc[0] == 1
    t = fraction_agreement(ref + 0.1, ref)
    assert t["bias"].iloc[0] == pytest.approx(0.1) and t["r2"].iloc[0] == pytest.approx(1)
    assert t["r2_identity"].iloc[0] < 1  # off the 1:1 line although perfectly correlated


def test_too_few_pairs_and_bad_shapes():
    t = fraction_agreement([[0.5]], [[0.4]])
    assert t["n"].iloc[0] == 1 and np.isnan(t["r2"].iloc[0]) and t["mae"].iloc[0] == pytest.approx(0.1)
    with pytest.raises(ShapeError):
        fraction_agreement(np.zeros((3, 2)), np.zeros((3, 3)))
    with pytest.raises(ShapeError):
        fraction_agreement(np.zeros((3, 2)), np.zeros((3, 2)), endmembers=["a"])


def test_scatter_figure_has_one_panel_per_endmember_with_the_identity_line():
    from matplotlib.figure import Figure

    from unmix.report.accuracy import fraction_scatter_figure

    rng = np.random.default_rng(0)
    ref = rng.dirichlet([2, 2], size=30)
    est = np.clip(ref + rng.normal(0, 0.05, ref.shape), 0, 1)
    table = fraction_agreement(est, ref, endmembers=["gv", "soil"])
    fig = fraction_scatter_figure(est, ref, table)
    assert isinstance(fig, Figure) and len(fig.axes) == 2
    for ax, name in zip(fig.axes, ["gv", "soil"]):
        assert ax.get_title() == name
        identity = [ln for ln in ax.get_lines() if ln.get_linestyle() == "--"][0]
        np.testing.assert_allclose(identity.get_xydata(), [[0, 0], [1, 1]])
        fit = [ln for ln in ax.get_lines() if ln.get_linestyle() == "-"][0]
        fit_y = fit.get_ydata()  # least-squares line as scipy.stats.linregress gives it
        lr = linregress(ref[:, fig.axes.index(ax)], est[:, fig.axes.index(ax)])
        np.testing.assert_allclose(fit_y, [lr.intercept, lr.intercept + lr.slope], rtol=1e-10)
