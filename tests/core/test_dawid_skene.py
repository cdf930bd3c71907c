"""Dawid-Skene EM recovers known confusion matrices on simulated data."""

from __future__ import annotations

import numpy as np

from truthsieve.core.dawid_skene import dawid_skene


def simulate(seed: int, n_items: int, sensitivities, specificities, prior_one: float, coverage: float = 1.0):
    rng = np.random.default_rng(seed)
    truth = (rng.random(n_items) < prior_one).astype(np.int8)
    labels = np.empty((len(sensitivities), n_items), dtype=np.int8)
    for i, (se, sp) in enumerate(zip(sensitivities, specificities)):
        correct = np.where(truth == 1, rng.random(n_items) < se, rng.random(n_items) < sp)
        labels[i] = np.where(correct, truth, 1 - truth)
    labelled = rng.random(labels.shape) < coverage
    return truth, labels, labelled


def test_recovers_priors_and_confusion_matrices():
    # "Maximum likelihood estimation of observer error-rates using the EM
    # algorithm", Applied Statistics 28, 1979: EM is consistent when sources err independently.
    # Tolerances are ours: priors within 0.02, confusion entries within 0.05.
    se = [0.95, 0.9, 0.8, 0.7, 0.6]
    sp = [0.9, 0.85, 0.9, 0.6, 0.75]
    truth, labels, labelled = simulate(11, 10_000, se, sp, prior_one=0.35)
    fit = dawid_skene(labels, labelled)
    assert fit.converged
    assert abs(fit.prior[1] - truth.mean()) < 0.02
    np.testing.assert_allclose(fit.sensitivity, se, atol=0.05)
    np.testing.assert_allclose(fit.specificity, sp, atol=0.05)
    posterior_labels = fit.posterior.argmax(axis=1)
    majority = (labels.mean(axis=0) > 0.5).astype(int)
    assert (posterior_labels == truth).mean() >= (majority == truth).mean()


def test_handles_partial_coverage():
    se = [0.9, 0.85, 0.8, 0.75]
    sp = [0.9, 0.8, 0.85, 0.7]
    truth, labels, labelled = simulate(5, 8_000, se, sp, prior_one=0.5, coverage=0.6)
    fit = dawid_skene(labels, labelled)
    np.testing.assert_allclose(fit.sensitivity, se, atol=0.05)
    np.testing.assert_allclose(fit.specificity, sp, atol=0.05)


def test_a_coin_flipper_gets_balanced_accuracy_near_one_half():
    truth, labels, labelled = simulate(3, 5_000, [0.95, 0.95, 0.9, 0.5], [0.95, 0.9, 0.95, 0.5], prior_one=0.4)
    fit = dawid_skene(labels, labelled)
    assert abs(fit.balanced_accuracy[3] - 0.5) < 0.05
    assert fit.balanced_accuracy[:3].min() > 0.85


# ---- K x K confusion matrices ----

# Sources for K = 3: rows are the true class, columns the reported class (each row sums to 1).
CONFUSIONS_3 = np.array(
    [
        [[0.90, 0.07, 0.03], [0.05, 0.85, 0.10], [0.02, 0.08, 0.90]],
        [[0.80, 0.15, 0.05], [0.10, 0.80, 0.10], [0.05, 0.15, 0.80]],
        [[0.75, 0.20, 0.05], [0.20, 0.70, 0.10], [0.05, 0.25, 0.70]],
        [[0.85, 0.05, 0.10], [0.15, 0.75, 0.10], [0.10, 0.10, 0.80]],
        [[0.60, 0.30, 0.10], [0.30, 0.60, 0.10], [0.10, 0.30, 0.60]],
    ]
)
# K = 4 (grades reject, feed, milling, premium): confusions mostly with the neighbouring grade.
CONFUSIONS_4 = np.array(
    [
        [[0.90, 0.06, 0.03, 0.01], [0.05, 0.85, 0.08, 0.02], [0.01, 0.07, 0.87, 0.05], [0.01, 0.02, 0.07, 0.90]],
        [[0.80, 0.15, 0.04, 0.01], [0.10, 0.78, 0.10, 0.02], [0.02, 0.12, 0.80, 0.06], [0.01, 0.03, 0.16, 0.80]],
        [[0.85, 0.10, 0.04, 0.01], [0.12, 0.75, 0.10, 0.03], [0.03, 0.10, 0.77, 0.10], [0.02, 0.03, 0.10, 0.85]],
        [[0.70, 0.20, 0.08, 0.02], [0.15, 0.70, 0.12, 0.03], [0.05, 0.15, 0.70, 0.10], [0.02, 0.08, 0.20, 0.70]],
        [[0.88, 0.08, 0.03, 0.01], [0.08, 0.80, 0.10, 0.02], [0.02, 0.10, 0.82, 0.06], [0.01, 0.04, 0.10, 0.85]],
        # grade inflation near one boundary: milling lots reported as premium a third of the time
        [[0.85, 0.10, 0.04, 0.01], [0.05, 0.85, 0.08, 0.02], [0.01, 0.04, 0.60, 0.35], [0.01, 0.01, 0.03, 0.95]],
    ]
)


def simulate_classes(seed: int, n_items: int, confusions: np.ndarray, prior, coverage: float = 1.0):
    """Truth, labels (-1 where a source did not label) and the empirical confusion matrices
    of this very sample (what an estimator that knew the truth would report)."""
    rng = np.random.default_rng(seed)
    n_sources, k, _ = confusions.shape
    truth = rng.choice(k, size=n_items, p=prior)
    cumulative = confusions.cumsum(axis=2)  # (n, K, K)
    draws = rng.random((n_sources, n_items))
    labels = np.stack([(draws[i][:, None] > cumulative[i, truth][:, : k - 1]).sum(axis=1) for i in range(n_sources)])
    labels = np.where(rng.random(labels.shape) < coverage, labels, -1)
    empirical = np.zeros_like(confusions)
    for i in range(n_sources):
        seen = labels[i] >= 0
        np.add.at(empirical[i], (truth[seen], labels[i][seen]), 1.0)
    empirical /= empirical.sum(axis=2, keepdims=True)
    return truth, labels, empirical


def test_recovers_three_by_three_confusion_matrices():
    # "Maximum likelihood estimation of observer error-rates using the EM algorithm",
    # Applied Statistics 28, 1979: the model is identifiable and EM consistent when sources
    # err independently. Tolerances (ours): the rarest class has about 0.2 * 12000 = 2400
    # items, so an entry's sampling error is at most sqrt(0.25 / 2400) = 0.0102; 0.05 is
    # about 5 such standard errors (two-sided tail ~6e-7 per entry, 45 entries). Against the
    # sample's own confusion matrices (no sampling error) EM only loses to the items whose
    # class it cannot tell, which five sources keep rare: 0.02.
    prior = [0.5, 0.3, 0.2]
    truth, labels, empirical = simulate_classes(21, 12_000, CONFUSIONS_3, prior)
    fit = dawid_skene(labels, n_classes=3)
    assert fit.converged and fit.confusion.shape == (5, 3, 3)
    np.testing.assert_allclose(fit.confusion, CONFUSIONS_3, atol=0.05)
    np.testing.assert_allclose(fit.confusion, empirical, atol=0.02)
    np.testing.assert_allclose(fit.prior, np.bincount(truth, minlength=3) / len(truth), atol=0.02)
    np.testing.assert_allclose(fit.recall, np.diagonal(CONFUSIONS_3, axis1=1, axis2=2), atol=0.05)
    np.testing.assert_allclose(fit.balanced_accuracy, np.trace(CONFUSIONS_3, axis1=1, axis2=2) / 3, atol=0.03)
    majority = np.array([np.bincount(col[col >= 0], minlength=3).argmax() for col in labels.T])
    assert (fit.posterior.argmax(axis=1) == truth).mean() > (majority == truth).mean()


def test_recovers_four_by_four_confusion_matrices_with_partial_coverage():
    # Same source and reasoning; each source labels about 70 % of 30000 items, so the rarest
    # class gives each source about 0.1 * 30000 * 0.7 = 2100 items: sampling error at most
    # sqrt(0.25 / 2100) = 0.0109 per entry, and 0.05 is over 4.5 of them (96 entries).
    prior = [0.4, 0.3, 0.2, 0.1]
    truth, labels, empirical = simulate_classes(33, 30_000, CONFUSIONS_4, prior, coverage=0.7)
    fit = dawid_skene(labels, n_classes=4)
    assert fit.converged and fit.confusion.shape == (6, 4, 4)
    np.testing.assert_allclose(fit.confusion, CONFUSIONS_4, atol=0.05)
    np.testing.assert_allclose(fit.confusion, empirical, atol=0.02)
    np.testing.assert_allclose(fit.prior, np.bincount(truth, minlength=4) / len(truth), atol=0.02)
    # the grade inflater's milling -> premium confusion is found
    assert abs(fit.confusion[5, 2, 3] - 0.35) < 0.05


def test_minus_one_means_the_same_as_the_mask():
    _, labels, _ = simulate_classes(4, 2_000, CONFUSIONS_3, [0.4, 0.4, 0.2], coverage=0.6)
    by_sentinel = dawid_skene(labels, n_classes=3)
    by_mask = dawid_skene(np.where(labels >= 0, labels, 0), labels >= 0, n_classes=3)
    np.testing.assert_array_equal(by_sentinel.confusion, by_mask.confusion)
    np.testing.assert_array_equal(by_sentinel.posterior, by_mask.posterior)


def test_a_report_that_ignores_the_truth_scores_one_over_k():
    # A source whose reports do not depend on the true class has theta[k, :] equal for every
    # k, so its macro-averaged recall is sum_l q_l / K = 1/K (by hand), whatever it reports
    # most: here it says "premium" 70 % of the time.
    rng = np.random.default_rng(90)  # not the simulation's seed: its uniforms would be the truth's
    _, labels, _ = simulate_classes(9, 20_000, CONFUSIONS_4[:5], [0.4, 0.3, 0.2, 0.1])
    ignorer = rng.choice(4, size=20_000, p=[0.1, 0.1, 0.1, 0.7])
    fit = dawid_skene(np.vstack([labels, ignorer]), n_classes=4)
    assert abs(fit.balanced_accuracy[5] - 0.25) < 0.03
    np.testing.assert_allclose(fit.balanced_accuracy[:5], np.trace(CONFUSIONS_4[:5], axis1=1, axis2=2) / 4, atol=0.03)


def test_binary_balanced_accuracy_is_the_mean_of_sensitivity_and_specificity_bit_for_bit():
    _, labels, labelled = simulate(8, 3_000, [0.9, 0.8, 0.7], [0.85, 0.8, 0.9], prior_one=0.4, coverage=0.8)
    fit = dawid_skene(labels, labelled)
    np.testing.assert_array_equal(fit.balanced_accuracy, (fit.sensitivity + fit.specificity) / 2.0)
    np.testing.assert_array_equal(fit.recall, np.stack([fit.specificity, fit.sensitivity], axis=1))


def test_a_class_nobody_reported_keeps_its_row_and_column():
    labels = np.array([[0, 1, 1, 0], [0, 1, 1, 1]])
    fit = dawid_skene(labels, n_classes=3)
    assert fit.confusion.shape == (2, 3, 3) and fit.posterior.shape == (4, 3)
    assert fit.prior[2] < 1e-6


def test_labels_outside_the_classes_are_an_error():
    import pytest

    with pytest.raises(ValueError, match="not a class index in 0..2"):
        dawid_skene(np.array([[0, 3], [1, 2]]), n_classes=3)
    with pytest.raises(ValueError, match="shape"):
        dawid_skene(np.array([[0, 1]]), np.array([[True]]), n_classes=2)
