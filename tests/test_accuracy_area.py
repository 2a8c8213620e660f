"""Tests of unmix.accuracy.area: error-adjusted areas and accuracies of a stratified sample.

Outside references: the worked example of Olofsson et al. (2014, section 5; RSE 148, 42-57,
doi:10.1016/j.rse.2014.02.015), values recalled from memory; the paper's equations written again as
plain loops here; and the textbook stratified estimators of a mean and of a ratio of means (Cochran
1977, ch. 5 and 6.11) computed with numpy from per-unit indicator variables.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from unmix.accuracy import error_matrix_proportions, stratified_area
from unmix.errors import InputError, ShapeError, UnmixError

# Olofsson et al. (2014), section 5 worked example (from memory): rows map, columns reference
CLASSES = ["deforestation", "forest_gain", "stable_forest", "stable_non_forest"]
COUNTS = np.array([[66, 0, 5, 4], [0, 55, 8, 12], [1, 0, 153, 11], [2, 1, 9, 313]])
PIXELS = np.array([200_000, 150_000, 3_200_000, 6_450_000])
HA = PIXELS * 0.09  # 30 m pixels: 900 m^2 = 0.09 ha


@pytest.fixture(scope="module")
def example():
    return stratified_area(COUNTS, HA, classes=CLASSES)


def test_worked_example_against_the_published_values(example):
    t = example
    # Olofsson et al. (2014) section 5 (from memory): deforestation 21,158 ha +- 6,158 ha (95 %),
    # user's accuracy 0.88 +- 0.07, producer's 0.75 +- 0.21, overall 0.95 +- 0.02
    assert t.loc["deforestation", "area"] == pytest.approx(21_158, abs=1)
    assert t.loc["deforestation", "area_ci95"] == pytest.approx(6_158, abs=1)
    assert t.loc["deforestation", "users_accuracy"] == pytest.approx(0.88, abs=0.005)
    assert t.loc["deforestation", "users_ci95"] == pytest.approx(0.07, abs=0.005)
    assert t.loc["deforestation", "producers_accuracy"] == pytest.approx(0.75, abs=0.005)
    assert t.loc["deforestation", "producers_ci95"] == pytest.approx(0.21, abs=0.005)
    assert t.attrs["overall_accuracy"] == pytest.approx(0.95, abs=0.005)
    assert t.attrs["overall_ci95"] == pytest.approx(0.02, abs=0.005)
    # the paper's other areas (from memory, less certain): forest gain 11,686 +- 3,756 ha,
    # stable forest 285,770 +- 15,510 ha, stable non-forest 581,386 +- 16,282 ha
    np.testing.assert_allclose(t["area"].values[1:], [11_686, 285_770, 581_386], atol=1)
    np.testing.assert_allclose(t["area_ci95"].values[1:], [3_756, 15_510, 16_282], atol=1.5)
    # areas add up to the mapped total (eq. 9 with proportions summing to 1)
    assert t["area"].sum() == pytest.approx(HA.sum(), rel=1e-12)


def _by_hand(n, area):
    """Olofsson et al. (2014) eqs. 4-11 written as loops over cells (no vectorisation)."""
    k = len(area)
    total = sum(area)
    W = [a / total for a in area]
    ni = [sum(n[i]) for i in range(k)]
    p = [[W[i] * n[i][j] / ni[i] for j in range(k)] for i in range(k)]  # eq. 4
    out = {}
    for c in range(k):
        p_col = sum(p[i][c] for i in range(k))  # eq. 8
        var = sum(W[i] ** 2 * (n[i][c] / ni[i]) * (1 - n[i][c] / ni[i]) / (ni[i] - 1) for i in range(k))  # eq. 10
        U = p[c][c] / sum(p[c])  # eq. 2
        P = p[c][c] / p_col  # eq. 3
        N_hat = sum(area[i] / ni[i] * n[i][c] for i in range(k))
        term = 0.0
        for i in range(k):
            if i != c:
                term += area[i] ** 2 * n[i][c] / ni[i] * (1 - n[i][c] / ni[i]) / (ni[i] - 1)
        var_P = (area[c] ** 2 * (1 - P) ** 2 * U * (1 - U) / (ni[c] - 1) + P ** 2 * term) / N_hat ** 2  # eq. 7
        out[c] = dict(area=total * p_col, area_se=total * var ** 0.5, users=U, users_se=(U * (1 - U) / (ni[c] - 1)) ** 0.5,
                      producers=P, producers_se=var_P ** 0.5)
    O = sum(p[i][i] for i in range(k))  # eq. 1
    var_O = sum(W[i] ** 2 * (n[i][i] / ni[i]) * (1 - n[i][i] / ni[i]) / (ni[i] - 1) for i in range(k))  # eq. 5
    return out, O, var_O ** 0.5, p


def test_matches_the_equations_written_as_loops(example):
    hand, O, O_se, p = _by_hand(COUNTS.tolist(), HA.tolist())
    for c, name in enumerate(CLASSES):
        row = example.loc[name]
        assert row["area"] == pytest.approx(hand[c]["area"], rel=1e-12)
        assert row["area_se"] == pytest.approx(hand[c]["area_se"], rel=1e-12)
        assert row["users_accuracy"] == pytest.approx(hand[c]["users"], rel=1e-12)
        assert row["users_se"] == pytest.approx(hand[c]["users_se"], rel=1e-12)
        assert row["producers_accuracy"] == pytest.approx(hand[c]["producers"], rel=1e-12)
        assert row["producers_se"] == pytest.approx(hand[c]["producers_se"], rel=1e-12)
    assert example.attrs["overall_accuracy"] == pytest.approx(O, rel=1e-12)
    assert example.attrs["overall_se"] == pytest.approx(O_se, rel=1e-12)
    np.testing.assert_allclose(example.attrs["error_matrix"], p, rtol=1e-12)
    np.testing.assert_allclose(error_matrix_proportions(COUNTS, HA, classes=CLASSES).values, p, rtol=1e-12)
    # 95 % interval = 1.96 standard errors (Olofsson et al. 2014, eq. 12; normal quantile from scipy)
    np.testing.assert_allclose(example["area_ci95"], 1.959963984540054 * example["area_se"], rtol=1e-12)


def _units(counts):
    """One row per sample unit: (stratum = map class, reference class)."""
    strata, refs = [], []
    for i, row in enumerate(counts):
        for j, c in enumerate(row):
            strata += [i] * int(c)
            refs += [j] * int(c)
    return np.array(strata), np.array(refs)


def test_matches_the_stratified_estimators_on_unit_indicators(example):
    # Cochran (1977) stratified mean: sum_h W_h ybar_h, variance sum_h W_h^2 s_h^2 / n_h (s_h^2 with ddof 1);
    # ratio of means R = Y/X with variance (1/X^2) sum_h W_h^2 (s_yh^2 + R^2 s_xh^2 - 2 R s_xyh) / n_h
    strata, refs = _units(COUNTS)
    W = HA / HA.sum()

    def mean_and_var(y):
        groups = [y[strata == h] for h in range(4)]
        return (sum(W[h] * g.mean() for h, g in enumerate(groups)),
                sum(W[h] ** 2 * g.var(ddof=1) / g.size for h, g in enumerate(groups)))

    for k, name in enumerate(CLASSES):
        est, var = mean_and_var((refs == k).astype(float))
        assert example.loc[name, "proportion"] == pytest.approx(est, rel=1e-12)
        assert example.loc[name, "area_se"] == pytest.approx(HA.sum() * np.sqrt(var), rel=1e-12)
        y = ((refs == k) & (strata == k)).astype(float)
        x = (refs == k).astype(float)
        Y, _ = mean_and_var(y)
        X, _ = mean_and_var(x)
        R = Y / X
        v = 0.0
        for h in range(4):
            yh, xh = y[strata == h], x[strata == h]
            cov = np.cov(yh, xh, ddof=1)
            v += W[h] ** 2 * (cov[0, 0] + R ** 2 * cov[1, 1] - 2 * R * cov[0, 1]) / yh.size
        assert example.loc[name, "producers_accuracy"] == pytest.approx(R, rel=1e-12)
        assert example.loc[name, "producers_se"] == pytest.approx(np.sqrt(v / X ** 2), rel=1e-10)
        in_h = refs[strata == k] == k  # user's accuracy: a proportion within one stratum
        assert example.loc[name, "users_se"] == pytest.approx(np.sqrt(in_h.var(ddof=1) / in_h.size), rel=1e-12)
    est, var = mean_and_var((refs == strata).astype(float))
    assert example.attrs["overall_accuracy"] == pytest.approx(est, rel=1e-12)
    assert example.attrs["overall_se"] == pytest.approx(np.sqrt(var), rel=1e-12)


def test_finite_population_correction():
    # Cochran (1977) eq. 5.6: each stratum's variance term times (1 - n_h / N_h); computed here from
    # the unit indicators with numpy
    units = np.array([80, 100, 3000, 6000])
    t = stratified_area(COUNTS, units, classes=CLASSES, stratum_units=units)
    strata, refs = _units(COUNTS)
    W = units / units.sum()
    for k, name in enumerate(CLASSES):
        y = (refs == k).astype(float)
        var = sum(W[h] ** 2 * (1 - (strata == h).sum() / units[h]) * y[strata == h].var(ddof=1) / (strata == h).sum()
                  for h in range(4))
        assert t.loc[name, "area_se"] == pytest.approx(units.sum() * np.sqrt(var), rel=1e-12)
    # a class sampled in full (here 1 pixel of 1) adds no variance instead of making every SE NaN
    t = stratified_area([[30, 2, 0], [3, 40, 0], [0, 0, 1]], [500, 800, 1], stratum_units=[500, 800, 1])
    assert np.isfinite(t["area_se"]).all() and t["users_se"].iloc[2] == 0
    assert np.isnan(stratified_area([[30, 2, 0], [3, 40, 0], [0, 0, 1]], [500, 800, 1])["area_se"]).all()
    with pytest.raises(InputError, match="stratum_units"):
        stratified_area(COUNTS, units, stratum_units=[10, 10, 10, 10])


def test_area_unit_is_the_unit_given():
    pixels = stratified_area(COUNTS, PIXELS, classes=CLASSES)
    hectares = stratified_area(COUNTS, HA, classes=CLASSES)
    np.testing.assert_allclose(pixels["area"] * 0.09, hectares["area"], rtol=1e-12)
    np.testing.assert_allclose(pixels["producers_accuracy"], hectares["producers_accuracy"], rtol=1e-12)


def test_perfect_map_gives_mapped_areas_and_full_accuracy():
    t = stratified_area(np.diag([50, 60, 70]), [10.0, 20.0, 70.0], classes=list("abc"))
    np.testing.assert_allclose(t["area"], [10, 20, 70])
    np.testing.assert_allclose(t["area_se"], 0)
    np.testing.assert_allclose(t[["users_accuracy", "producers_accuracy"]], 1)
    assert t.attrs["overall_accuracy"] == 1


def test_simulated_sample_intervals_bracket_the_truth():
    # a map with known errors: true area of each class known exactly; repeated stratified samples
    # give 95 % intervals that hold the truth about 95 % of the time (Cochran 1977: normal approximation)
    rng = np.random.default_rng(5)
    pixels = np.array([20_000, 30_000, 150_000])
    confusion = np.array([[0.8, 0.1, 0.1], [0.05, 0.7, 0.25], [0.02, 0.03, 0.95]])  # P(reference | map)
    truth = pixels @ confusion
    covered = np.zeros(3)
    trials = 400
    for _ in range(trials):
        counts = np.array([rng.multinomial(n, confusion[i]) for i, n in enumerate([100, 100, 200])])
        t = stratified_area(counts, pixels)
        covered += np.abs(t["area"].values - truth) <= t["area_ci95"].values
    assert np.all(covered / trials > 0.9) and np.all(covered / trials < 0.99)


def test_unsampled_and_unreferenced_classes_give_nan_not_a_crash():
    # a class never referenced: producer's accuracy 0/0 -> NaN, its area 0
    t = stratified_area([[10, 0, 0], [0, 10, 0], [2, 0, 0]], [10.0, 10.0, 5.0])
    assert np.isnan(t["producers_accuracy"].iloc[2]) and t["area"].iloc[2] == 0
    assert t["users_accuracy"].iloc[2] == 0
    # a mapped stratum without sample units: its share cannot be estimated -> areas NaN
    t = stratified_area([[10, 0], [0, 0]], [10.0, 10.0])
    assert np.isnan(t["users_accuracy"].iloc[1]) and np.isnan(t["area"]).all()
    # a class neither mapped nor sampled holds no part of the map
    t = stratified_area([[10, 2, 0], [1, 9, 0], [0, 0, 0]], [10.0, 10.0, 0.0])
    assert t["area"].iloc[2] == 0 and np.isfinite(t["area"].iloc[:2]).all()
    assert np.isfinite(t["area_se"]).all() and np.isfinite(t.attrs["overall_se"])
    assert np.isnan(t["users_accuracy"].iloc[2])  # no sample unit: no user's accuracy
    np.testing.assert_allclose(t["area_se"].iloc[:2], stratified_area([[10, 2], [1, 9]], [10.0, 10.0])["area_se"])


@pytest.mark.parametrize("counts, area, error, words", [
    ([[1, 2, 3], [4, 5, 6]], [1, 2], ShapeError, "square"),
    ([[1, -2], [3, 4]], [1, 2], InputError, "counts[0, 1]"),
    ([[1, 2.5], [3, 4]], [1, 2], InputError, "whole numbers"),
    ([[1, 2], [3, 4]], [1, 2, 3], ShapeError, "one value per map class"),
    ([[1, 2], [3, 4]], [-1, 2], InputError, "non-negative"),
])
def test_bad_input_raises_a_clear_error(counts, area, error, words):
    with pytest.raises(error, match=None) as info:
        stratified_area(counts, area)
    assert words in str(info.value) and isinstance(info.value, UnmixError)


def test_bad_confidence_and_class_names():
    with pytest.raises(InputError, match="confidence"):
        stratified_area(COUNTS, HA, confidence=95)
    with pytest.raises(ShapeError, match="distinct"):
        stratified_area(COUNTS, HA, classes=["a", "a", "b", "c"])
    assert isinstance(stratified_area(COUNTS, HA, confidence=0.9), pd.DataFrame)


@given(st.integers(2, 5).flatmap(lambda k: st.tuples(
    st.lists(st.lists(st.integers(0, 30), min_size=k, max_size=k), min_size=k, max_size=k),
    st.lists(st.floats(1.0, 1e6), min_size=k, max_size=k))))
def test_invariants_of_any_sample(case):
    # properties of the estimators (Olofsson et al. 2014, eqs. 4, 8, 9): proportions of the error
    # matrix sum to 1, the estimated areas to the mapped total, accuracies lie in 0..1
    counts, area = np.array(case[0]), np.array(case[1])
    counts[np.arange(len(area)), np.arange(len(area))] += 2  # every stratum sampled
    t = stratified_area(counts, area)
    assert np.sum(t.attrs["error_matrix"]) == pytest.approx(1.0)
    assert t["area"].sum() == pytest.approx(area.sum(), rel=1e-9)
    for column in ("users_accuracy", "producers_accuracy"):
        values = t[column].to_numpy()
        assert np.all((values[np.isfinite(values)] >= 0) & (values[np.isfinite(values)] <= 1 + 1e-12))
    assert 0 <= t.attrs["overall_accuracy"] <= 1 + 1e-12 and (t["area_se"] >= 0).all()
