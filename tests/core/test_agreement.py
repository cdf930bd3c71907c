"""Agreement statistics against published worked examples and reference libraries."""

from __future__ import annotations

import krippendorff
import numpy as np
import pytest
from sklearn.metrics import cohen_kappa_score
from statsmodels.stats.inter_rater import aggregate_raters
from statsmodels.stats.inter_rater import fleiss_kappa as statsmodels_fleiss

from truthsieve.core.agreement import (
    batch_agreement,
    category_counts,
    cohen_kappa,
    cohen_kappas,
    fleiss_kappa,
    fleiss_kappa_of_labels,
    krippendorff_alpha_nominal,
    krippendorff_alpha_of_counts,
    krippendorff_alpha_of_labels,
)

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


# ---- K categories through the class-index path (labels 0..K-1, -1 or a mask for missing) ----

def raters_from_counts(counts: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """A raters x items matrix of class indices whose per-item counts are ``counts``
    (each item's raters shuffled, which no agreement statistic may notice)."""
    columns = [rng.permutation(np.repeat(np.arange(counts.shape[1]), row)) for row in counts]
    return np.stack(columns, axis=1)


def test_fleiss_kappa_worked_example_through_the_class_index_path():
    # The 5-category worked example above (10 subjects, 14 raters; the Wikipedia article
    # "Fleiss' kappa", Wikipedia, section "Worked example", values from memory), now as
    # 14 raters' class indices 0..4. By hand: column totals 20, 28, 39, 21, 32 of 140, so
    # P_e = sum p_k^2 = 0.212755; mean P_j = 0.378022; kappa = 0.165267 / 0.787245 = 0.2099.
    labels = raters_from_counts(FLEISS_WORKED_EXAMPLE, np.random.default_rng(7))
    assert labels.shape == (14, 10)
    np.testing.assert_array_equal(category_counts(labels, n_classes=5), FLEISS_WORKED_EXAMPLE)
    kappa = fleiss_kappa_of_labels(labels, n_classes=5)
    assert kappa == pytest.approx(0.2099, abs=5e-5)
    assert kappa == pytest.approx(statsmodels_fleiss(FLEISS_WORKED_EXAMPLE), abs=1e-12)
    # statsmodels' own table from the raw ratings (items x raters) agrees as well
    table, _ = aggregate_raters(labels.T, n_cat=5)
    assert kappa == pytest.approx(statsmodels_fleiss(table), abs=1e-12)


@pytest.mark.parametrize("seed", range(6))
def test_fleiss_kappa_matches_statsmodels_on_random_four_class_labels(seed):
    rng = np.random.default_rng(seed)
    truth = rng.integers(0, 4, 60)
    labels = np.where(rng.random((5, 60)) < 0.6, truth, rng.integers(0, 4, (5, 60)))
    table, _ = aggregate_raters(labels.T, n_cat=4)
    assert fleiss_kappa_of_labels(labels, n_classes=4) == pytest.approx(statsmodels_fleiss(table), abs=1e-12)
    # a missing label makes the counts unequal: Fleiss' kappa is then undefined
    labels[2, 5] = -1
    assert fleiss_kappa_of_labels(labels, n_classes=4) is None


def test_krippendorff_published_example_through_the_class_index_path():
    # The 0.743 example above ("Computing Krippendorff's Alpha-Reliability", University of
    # Pennsylvania, 2011), values 1..5 as class indices 0..4 and -1 for missing.
    m = -1
    labels = np.array(
        [
            [0, 1, 2, 2, 1, 0, 3, 0, 1, m, m, m],
            [0, 1, 2, 2, 1, 1, 3, 0, 1, 4, m, 2],
            [m, 2, 2, 2, 1, 2, 3, 1, 1, 4, 0, m],
            [0, 1, 2, 2, 1, 3, 3, 0, 1, 4, 0, m],
        ]
    )
    assert krippendorff_alpha_of_labels(labels, n_classes=5) == pytest.approx(0.743, abs=5e-4)


@pytest.mark.parametrize("seed", range(10))
def test_krippendorff_alpha_matches_reference_package_with_four_classes_and_missing_values(seed):
    rng = np.random.default_rng(100 + seed)
    truth = rng.integers(0, 4, 50)
    labels = np.where(rng.random((6, 50)) < 0.65, truth, rng.integers(0, 4, (6, 50)))
    labelled = rng.random((6, 50)) >= 0.35
    ratings = np.where(labelled, labels.astype(float), np.nan)
    expected = krippendorff.alpha(reliability_data=ratings, level_of_measurement="nominal", value_domain=[0, 1, 2, 3])
    assert krippendorff_alpha_nominal(ratings) == pytest.approx(expected, abs=1e-10)
    assert krippendorff_alpha_of_labels(labels, labelled, n_classes=4) == pytest.approx(expected, abs=1e-10)
    # -1 for missing means the same as the mask
    assert krippendorff_alpha_of_labels(np.where(labelled, labels, -1), n_classes=4) == pytest.approx(expected, abs=1e-10)


@pytest.mark.parametrize("seed", range(10))
def test_cohen_kappa_matches_scikit_learn_with_three_classes(seed):
    rng = np.random.default_rng(200 + seed)
    a = rng.integers(0, 3, 300)
    b = np.where(rng.random(300) < 0.6, a, rng.integers(0, 3, 300))
    assert cohen_kappa(a, b, n_classes=3) == pytest.approx(cohen_kappa_score(a, b), abs=1e-12)
    # -1 (missing) on either side drops the pair
    a_missing = np.where(rng.random(300) < 0.2, -1, a)
    present = a_missing >= 0
    assert cohen_kappa(a_missing, b, n_classes=3) == pytest.approx(cohen_kappa_score(a[present], b[present]), abs=1e-12)


def test_cohen_kappa_three_class_table_by_hand():
    # Agreement table (rows first rater, columns second) [[10, 2, 0], [3, 8, 1], [0, 2, 4]], 30 items.
    # By hand: p_o = 22/30; row shares 12, 12, 6 /30, column shares 13, 12, 5 /30;
    # p_e = (156 + 144 + 30) / 900 = 330/900; kappa = (660/900 - 330/900) / (570/900) = 330/570 = 0.578947.
    table = [[10, 2, 0], [3, 8, 1], [0, 2, 4]]
    first = np.concatenate([np.full(table[r][c], r) for r in range(3) for c in range(3)])
    second = np.concatenate([np.full(table[r][c], c) for r in range(3) for c in range(3)])
    assert cohen_kappa(first, second, n_classes=3) == pytest.approx(330 / 570, abs=1e-12)


def test_binary_numbers_do_not_depend_on_whether_k_is_given():
    # K = 2 must stay bit-identical to the path the binary decision.json was made with.
    rng = np.random.default_rng(5)
    labels = rng.integers(0, 2, (4, 80)).astype(np.int8)
    labelled = rng.random((4, 80)) < 0.8
    a, b = labels[0], labels[1]
    assert cohen_kappa(a, b, n_classes=2) == cohen_kappa(a, b)
    ratings = np.where(labelled, labels.astype(np.float64), np.nan)
    ones = (labelled & (labels == 1)).sum(axis=0)
    zeros = (labelled & (labels == 0)).sum(axis=0)
    full = np.ones_like(labelled)
    assert batch_agreement(labels, labelled) == (krippendorff_alpha_nominal(ratings), None)
    assert batch_agreement(labels, full)[1] == fleiss_kappa(np.stack([(labels == 0).sum(axis=0), (labels == 1).sum(axis=0)], axis=1))
    np.testing.assert_array_equal(category_counts(labels, labelled), np.stack([zeros, ones], axis=1))


def test_labels_outside_the_classes_are_an_error():
    with pytest.raises(ValueError, match="not a class index in 0..2"):
        cohen_kappa(np.array([0, 1, 3]), np.array([0, 1, 2]), n_classes=3)
    with pytest.raises(ValueError, match="not a class index in 0..3"):
        category_counts(np.array([[0, 4], [1, 2]]), n_classes=4)
    with pytest.raises(ValueError, match="at least 2"):
        category_counts(np.array([[0, 0]]), n_classes=1)


# ---- from each source's own labels (the pipeline's form) ----

@pytest.mark.parametrize("seed", range(12))
def test_agreement_from_each_sources_labels_is_the_matrix_form_float_for_float(seed):
    from truthsieve.core.agreement import batch_agreement_of_counts, krippendorff_alpha_of_counts, source_category_counts

    rng = np.random.default_rng(300 + seed)
    n, m, k = int(rng.integers(1, 9)), int(rng.integers(1, 400)), int(rng.integers(2, 6))
    truth = rng.integers(0, k, m)
    labels = np.where(rng.random((n, m)) < 0.7, truth, rng.integers(0, k, (n, m)))
    labelled = np.ones((n, m), bool) if seed % 3 == 0 else rng.random((n, m)) < rng.uniform(0.1, 0.9)
    sources = [(np.flatnonzero(seen), row[seen]) for row, seen in zip(labels, labelled)]
    counts = source_category_counts(sources, m, k)
    np.testing.assert_array_equal(counts, category_counts(labels, labelled, k))
    assert batch_agreement_of_counts(counts) == batch_agreement(labels, labelled, k)
    ratings = np.where(labelled, labels.astype(float), np.nan)
    assert krippendorff_alpha_of_counts(counts) == krippendorff_alpha_nominal(ratings)
    if np.isfinite(ratings).sum() and (np.isfinite(ratings).sum(axis=0) >= 2).any() and len(np.unique(ratings[np.isfinite(ratings)])) > 1:
        expected = krippendorff.alpha(reliability_data=ratings, level_of_measurement="nominal")
        assert krippendorff_alpha_of_counts(counts) == pytest.approx(expected, abs=1e-10)


def test_category_counts_from_sources_refuse_a_label_outside_the_classes():
    from truthsieve.core.agreement import source_category_counts

    with pytest.raises(ValueError, match="not a class index"):
        source_category_counts([(np.array([0, 1]), np.array([0, 2]))], 2, 2)
    with pytest.raises(ValueError, match="label -1 is not a class index"):  # -1 would count on the item before
        source_category_counts([(np.array([0, 1]), np.array([0, -1])), (np.array([0, 1]), np.array([0, 1]))], 3, 2)


@pytest.mark.parametrize("seed", range(40))
def test_cohen_kappas_of_many_pairs_equal_one_call_per_pair(seed):
    """One count table for every source gives each pair's kappa float for float as
    :func:`cohen_kappa` on that pair alone (missing labels, empty pairs, one-label pairs)."""
    rng = np.random.default_rng(seed)
    k, n = int(rng.integers(2, 5)), int(rng.integers(1, 25))
    owner = np.repeat(np.arange(n), rng.integers(0, 30, n))
    first = rng.integers(-1 if seed % 3 == 0 else 0, k, owner.size)
    second = np.where(rng.random(owner.size) < rng.random(), first, rng.integers(0, k, owner.size))
    if seed % 4 == 0:
        second[owner == 0], first[owner == 0] = 1, 1  # p_e = 1: undefined
    expected = [cohen_kappa(first[owner == i], second[owner == i], k) for i in range(n)]
    assert cohen_kappas(owner, first, second, n, k) == expected


def test_cohen_kappas_match_scikit_learn():
    """scikit-learn's cohen_kappa_score (a general-purpose reference library) on each pair."""
    rng = np.random.default_rng(5)
    owner = np.repeat(np.arange(6), 50)
    first = rng.integers(0, 3, owner.size)
    second = np.where(rng.random(owner.size) < 0.6, first, rng.integers(0, 3, owner.size))
    got = cohen_kappas(owner, first, second, 6, 3)
    for i in range(6):
        assert got[i] == pytest.approx(cohen_kappa_score(first[owner == i], second[owner == i]), abs=1e-12)


def test_cohen_kappas_refuse_a_label_outside_the_classes():
    with pytest.raises(ValueError):
        cohen_kappas([0, 0], [0, 2], [0, 1], 1, 2)


def _fraction_alpha(counts):
    """Nominal alpha straight from its definition, in exact fractions: the coincidence
    matrix o_ck = sum_u n_uc (n_uk - [c == k]) / (m_u - 1) over units with m_u >= 2, then
    alpha = 1 - (n - 1)(n - sum o_cc) / (n^2 - sum n_c^2) ("Computing Krippendorff's
    Alpha-Reliability", University of Pennsylvania, 2011)."""
    from fractions import Fraction

    k = len(counts[0])
    o = [[Fraction(0)] * k for _ in range(k)]
    for row in counts:
        m = sum(row)
        if m < 2:
            continue
        for c in range(k):
            for d in range(k):
                o[c][d] += Fraction(row[c] * (row[d] - (c == d)), m - 1)
    marginals = [sum(o[c]) for c in range(k)]
    n = sum(marginals)
    expected = n * n - sum(x * x for x in marginals)
    return None if expected <= 0 else float(1 - (n - 1) * (n - sum(o[c][c] for c in range(k))) / expected)


def _fraction_fleiss(counts):
    """Fleiss' kappa from its definition in exact fractions ("Measuring nominal scale
    agreement among many raters", Psychological Bulletin 76(5), 1971)."""
    from fractions import Fraction

    r, m = sum(counts[0]), len(counts)
    p_bar = sum(Fraction(sum(x * x for x in row) - r, r * (r - 1)) for row in counts) / m
    shares = [Fraction(sum(row[c] for row in counts), m * r) for c in range(len(counts[0]))]
    chance = sum(s * s for s in shares)
    return None if chance >= 1 else float((p_bar - chance) / (1 - chance))


@pytest.mark.parametrize("seed", range(60))
def test_alpha_and_fleiss_are_the_exact_values_rounded_once(seed):
    """Brute-force oracle in exact fractions: the float is the exact value, correctly
    rounded, so it cannot depend on how a machine's SIMD or BLAS kernels order float sums."""
    rng = np.random.default_rng(seed)
    k, units = int(rng.integers(2, 5)), int(rng.integers(1, 40))
    ragged = rng.integers(0, 6, (units, k))
    assert krippendorff_alpha_of_counts(ragged) == _fraction_alpha(ragged.tolist())  # an unused class adds nothing to either
    r = int(rng.integers(2, 8))
    even = np.stack([np.bincount(rng.integers(0, k, r), minlength=k) for _ in range(units)])
    assert fleiss_kappa(even) == _fraction_fleiss(even.tolist())
