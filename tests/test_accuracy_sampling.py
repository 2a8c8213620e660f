"""Tests of unmix.accuracy.sampling: sample size (Olofsson et al. 2014, eq. 13), allocation, drawing."""

from __future__ import annotations

import math

import numpy as np
import pytest

from unmix.accuracy import allocate, sample_size, stratified_sample
from unmix.errors import InputError, ShapeError

W = [0.02, 0.015, 0.32, 0.645]  # map shares of the Olofsson et al. (2014) worked example
U = [0.7, 0.6, 0.9, 0.95]  # their conjectured user's accuracies (from memory)


def test_sample_size_of_the_worked_example():
    # Olofsson et al. (2014) section 5 (from memory): target S(O) = 0.01 gives n = 641
    assert sample_size(W, U, 0.01) == 641
    # eq. 13 by hand: n = (sum W_i sqrt(U_i (1 - U_i)) / S(O))^2
    by_hand = (sum(w * math.sqrt(u * (1 - u)) for w, u in zip(W, U)) / 0.01) ** 2
    assert sample_size(W, U, 0.01) == math.ceil(by_hand)
    # pixel counts instead of shares: only the shares matter
    assert sample_size([200_000, 150_000, 3_200_000, 6_450_000], U, 0.01) == 641


def test_finite_population_form_and_monotonicity():
    # Cochran (1977) eq. 5.25: n = (sum W S)^2 / (V + sum W S^2 / N)
    s = [math.sqrt(u * (1 - u)) for u in U]
    N = 2000
    expected = sum(w * si for w, si in zip(W, s)) ** 2 / (0.01 ** 2 + sum(w * si ** 2 for w, si in zip(W, s)) / N)
    assert sample_size(W, U, 0.01, population=N) == math.ceil(expected)
    assert sample_size(W, U, 0.02) < sample_size(W, U, 0.01)
    assert sample_size(W, 0.8, 0.01) == math.ceil((math.sqrt(0.16) / 0.01) ** 2)  # one accuracy for all


def test_sample_size_rejects_bad_values():
    with pytest.raises(ShapeError):
        sample_size(W, [0.9, 0.9], 0.01)
    with pytest.raises(InputError, match="0..1"):
        sample_size(W, [0.9, 1.2, 0.9, 0.9], 0.01)
    with pytest.raises(InputError, match="target_se_overall"):
        sample_size(W, U, 0.0)


def test_allocation_keeps_the_minimum_and_shares_the_rest_by_area():
    n = allocate(641, [200_000, 150_000, 3_200_000, 6_450_000], minimum=75)
    assert n.sum() == 641 and n[0] == n[1] == 75
    # the remainder 491 in proportion to area between the two large strata
    assert abs(n[2] - 491 * 0.32 / 0.965) < 1 and abs(n[3] - 491 * 0.645 / 0.965) < 1
    # a total smaller than the minima: every stratum gets the minimum
    assert allocate(100, [1000, 1000, 1000], minimum=50).tolist() == [50, 50, 50]
    # never more than a stratum has pixels; a stratum of zero area gets nothing
    assert allocate(300, [10, 1000, 0], minimum=50).tolist() == [10, 290, 0]


def test_stratified_sample_is_stratified_and_reproducible():
    rng = np.random.default_rng(0)
    m = rng.choice([0, 1, 2, 5], size=(60, 70), p=[0.7, 0.2, 0.08, 0.02]).astype(np.int8)
    sizes = {0: 40, 1: 30, 2: 20}
    drawn = stratified_sample(m, sizes, seed=3)
    assert set(drawn) == {0, 1, 2}
    for code, idx in drawn.items():
        assert idx.size == sizes[code] == np.unique(idx).size  # without replacement
        rows, cols = np.unravel_index(idx, m.shape)
        assert np.all(m[rows, cols] == code)  # every unit inside its class
    again = stratified_sample(m, sizes, seed=3)
    assert all(np.array_equal(drawn[c], again[c]) for c in sizes)
    other = stratified_sample(m, sizes, seed=4)
    assert not all(np.array_equal(drawn[c], other[c]) for c in sizes)


def test_stratified_sample_is_uniform_within_a_class():
    # every pixel of a class is equally likely (chi-square goodness of fit, scipy)
    from scipy.stats import chisquare

    m = np.zeros((4, 5), dtype=np.int16)
    hits = np.zeros(20)
    for seed in range(2000):
        hits[stratified_sample(m, {0: 3}, seed=seed)[0]] += 1
    assert chisquare(hits).pvalue > 0.001


def test_stratified_sample_refuses_more_than_a_class_holds():
    with pytest.raises(InputError, match="class code 1"):
        stratified_sample(np.array([[0, 1], [0, 0]]), {1: 2}, seed=0)
    with pytest.raises(InputError, match="integer"):
        stratified_sample(np.zeros((2, 2)), {0: 1}, seed=0)
