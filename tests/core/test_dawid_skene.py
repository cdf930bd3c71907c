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
