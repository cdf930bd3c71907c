"""Wilson intervals, drift tests and sample-size advice against published values and statsmodels."""

from __future__ import annotations

import math

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import proportion_confint, proportions_ztest

from truthsieve.core.sampling import (
    effective_sample_size,
    holm_adjust,
    items_needed,
    threshold_growth,
    two_proportion_p_value,
    wilson_interval,
)


def test_wilson_interval_published_example():
    # "Two-sided confidence intervals for the single proportion: comparison of
    # seven methods", Statistics in Medicine 17, 1998, Table I: 81/263 -> 0.2553 to 0.3662.
    low, high = wilson_interval(81, 263)
    assert (round(low, 4), round(high, 4)) == (0.2553, 0.3662)


@pytest.mark.parametrize(("successes", "trials"), [(0, 10), (10, 10), (3, 7), (150, 1000), (1, 2)])
@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99])
def test_wilson_interval_matches_statsmodels(successes, trials, confidence):
    expected = proportion_confint(successes, trials, alpha=1 - confidence, method="wilson")
    assert wilson_interval(successes, trials, confidence) == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize(("a", "n", "b", "m"), [(30, 100, 45, 120), (5, 200, 40, 1000), (50, 50, 20, 60)])
def test_two_proportion_test_matches_statsmodels(a, n, b, m):
    _, expected = proportions_ztest([a, b], [n, m])
    assert two_proportion_p_value(a, n, b, m) == pytest.approx(expected, rel=1e-9)


def test_holm_adjustment_matches_statsmodels():
    p = np.array([0.01, 0.04, 0.03, 0.005, 0.5])
    assert holm_adjust(p) == pytest.approx(multipletests(p, method="holm")[1])


def test_items_needed_for_a_finite_class_is_hoeffding_with_a_union_bound():
    # "Understanding Machine Learning: From Theory to Algorithms", Cambridge University
    # Press, 2014, Corollary 4.6, at delta / n per source. By hand:
    # 2 * 100 * exp(-2 m 0.05^2) <= 0.05 / 10  <=>  m >= ln(40000) / 0.005 = 2119.3
    assert items_needed(10, 0.05, 0.05, finite_size=100) == 2120
    assert 2 * 10 * 100 * math.exp(-2 * 2120 * 0.05**2) <= 0.05 < 2 * 10 * 100 * math.exp(-2 * 2119 * 0.05**2)
    # constant class, 2 rules, 1 source, eps 0.1, delta 0.1: ln(40) / 0.02 = 184.44 -> 185
    assert items_needed(1, 0.1, 0.1, finite_size=2) == 185


def test_threshold_growth_function_counts_labelings():
    # one feature, m = 3 distinct values: cuts before, between (2) and after -> 4 positions,
    # two orientations -> 8 = 2 * 1 * (3 + 1)
    assert threshold_growth(1, 3) == 8
    assert threshold_growth(5, 10) == 110


def test_items_needed_for_thresholds_from_the_growth_function():
    # Same book, Theorem 6.11: need (4 + sqrt(ln tau(2m))) / (delta sqrt(2m)) <= eps with
    # tau(2m) = 2 d (2m + 1). d = 1, n = 1, eps = delta = 0.5, i.e.
    # 4 + sqrt(ln(4m + 2)) <= 0.25 sqrt(2m). By hand (4 decimals):
    #   m = 358: ln(1434) = 7.2682, sqrt = 2.6960 -> 6.6960 > 0.25 * 26.7582 = 6.6895: not enough
    #   m = 359: ln(1438) = 7.2710, sqrt = 2.6965 -> 6.6965 <= 0.25 * 26.7955 = 6.6989: enough
    assert items_needed(1, 0.5, 0.5, threshold_features=1) == 359
    # Two sources: delta 0.25 per source, so 4 + sqrt(ln(4m + 2)) <= 0.125 sqrt(2m):
    #   m = 1547: 4 + sqrt(ln 6190) = 4 + 2.95477 = 6.95477 > 0.125 * 55.6237 = 6.95296
    #   m = 1548: 4 + sqrt(ln 6194) = 4 + 2.95488 = 6.95488 <= 0.125 * 55.6417 = 6.95521
    assert items_needed(2, 0.5, 0.5, threshold_features=1) == 1548


def test_effective_sample_size_of_unit_and_skewed_weights():
    assert effective_sample_size(np.ones(37)) == pytest.approx(37)
    assert effective_sample_size(np.array([1.0, 0.0, 0.0])) == pytest.approx(1)
