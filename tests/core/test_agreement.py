"""Agreement statistics against published worked examples and reference libraries."""

from __future__ import annotations

import krippendorff
import numpy as np
import pytest
from sklearn.metrics import cohen_kappa_score
from statsmodels.stats.inter_rater import aggregate_raters
from statsmodels.stats.inter_rater import fleiss_kappa as statsmodels_fleiss

from truthsieve.core.agreement import cohen_kappa, fleiss_kappa, krippendorff_alpha_nominal

# The 10 subjects x 14 raters x 5 categories example widely reproduced from Fleiss' method
# (e.g. the Wikipedia article "Fleiss' kappa"; values from memory): kappa = 0.210.
FLEISS_WORKED_EXAMPLE = np.array(
    [
        [0, 0, 0, 0, 14],
        [0, 2, 6, 4, 2],
        [0, 0, 3, 5, 6],
        [0, 3, 9, 2, 0],
        [2, 2, 8, 1, 1],
        [7, 7, 0, 0, 0],
        [3, 2, 6, 3, 0],
        [2, 5, 3, 2, 2],
        [6, 5, 2, 1, 0],
        [0, 2, 2, 3, 7],
    ]
)


def test_fleiss_kappa_worked_example():
    assert fleiss_kappa(FLEISS_WORKED_EXAMPLE) == pytest.approx(0.210, abs=5e-4)
    assert fleiss_kappa(FLEISS_WORKED_EXAMPLE) == pytest.approx(statsmodels_fleiss(FLEISS_WORKED_EXAMPLE))


def test_fleiss_kappa_on_fleiss_1971_psychiatric_diagnoses():
    # "Measuring nominal scale agreement among many raters", Psychological Bulletin
    # 76(5), 1971: 30 patients x 6 raters x 5 diagnoses, kappa = 0.430. The raw ratings as
    # shipped with statsmodels' own test suite (reproduced from R's irr package).
    from statsmodels.stats.tests.test_inter_rater import diagnoses

    assert diagnoses.shape == (30, 6)
    table, _ = aggregate_raters(diagnoses)
    assert fleiss_kappa(table) == pytest.approx(0.430, abs=5e-4)
    assert fleiss_kappa(table) == pytest.approx(statsmodels_fleiss(table), abs=1e-12)


def test_fleiss_kappa_needs_equal_label_counts():
    assert fleiss_kappa(np.array([[2, 1], [1, 1]])) is None


def test_cohen_kappa_two_by_two_table():
    # [[20, 5], [10, 15]]: p_o = 0.70, p_e = 0.5*0.6 + 0.5*0.4 = 0.50, kappa = 0.40
    # (hand calculation; "A coefficient of agreement for nominal scales", Educational and
    # Psychological Measurement 20, 1960).
    first = np.array([1] * 20 + [1] * 5 + [0] * 10 + [0] * 15)
    second = np.array([1] * 20 + [0] * 5 + [1] * 10 + [0] * 15)
    assert cohen_kappa(first, second) == pytest.approx(0.40)
    assert cohen_kappa(first, second) == pytest.approx(cohen_kappa_score(first, second))


@pytest.mark.parametrize("seed", range(10))
def test_cohen_kappa_matches_scikit_learn_on_random_labels(seed):
    rng = np.random.default_rng(seed)
    a = rng.integers(0, 2, 200)
    b = np.where(rng.random(200) < 0.7, a, 1 - a)
    assert cohen_kappa(a, b) == pytest.approx(cohen_kappa_score(a, b), abs=1e-12)


def test_krippendorff_alpha_published_example_with_missing_values():
    # "Computing Krippendorff's Alpha-Reliability", University of Pennsylvania,
    # 2011: 4 observers x 12 units with missing values, nominal alpha = 0.743.
    nan = np.nan
    ratings = np.array(
        [
            [1, 2, 3, 3, 2, 1, 4, 1, 2, nan, nan, nan],
            [1, 2, 3, 3, 2, 2, 4, 1, 2, 5, nan, 3],
            [nan, 3, 3, 3, 2, 3, 4, 2, 2, 5, 1, nan],
            [1, 2, 3, 3, 2, 4, 4, 1, 2, 5, 1, nan],
        ]
    )
    assert krippendorff_alpha_nominal(ratings) == pytest.approx(0.743, abs=5e-4)


@pytest.mark.parametrize("seed", range(10))
def test_krippendorff_alpha_matches_reference_package(seed):
    rng = np.random.default_rng(seed)
    truth = rng.integers(0, 2, 40)
    ratings = np.where(rng.random((5, 40)) < 0.8, truth, 1 - truth).astype(float)
    ratings[rng.random((5, 40)) < 0.3] = np.nan
    expected = krippendorff.alpha(reliability_data=ratings, level_of_measurement="nominal")
    assert krippendorff_alpha_nominal(ratings) == pytest.approx(expected, abs=1e-10)
