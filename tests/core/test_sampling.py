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
    two_proportion_p_value,
    wilson_interval,
)


def test_wilson_interval_published_example():
    # Newcombe, "Two-sided confidence intervals for the single proportion: comparison of
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


def test_items_needed_hoeffding_union_bound():
    # 2 * 10 * 100 * exp(-2 m 0.05^2) <= 0.05 by hand: m >= ln(40000) / 0.005 = 2119.3
    assert items_needed(10, 100, 0.05, 0.05) == 2120
    assert 2 * 10 * 100 * math.exp(-2 * 2120 * 0.05**2) <= 0.05 < 2 * 10 * 100 * math.exp(-2 * 2119 * 0.05**2)


def test_effective_sample_size_of_unit_and_skewed_weights():
    assert effective_sample_size(np.ones(37)) == pytest.approx(37)
    assert effective_sample_size(np.array([1.0, 0.0, 0.0])) == pytest.approx(1)
