"""Dawid-Skene: each source's confusion matrix and each item's class posterior by EM.

Model: item ``j`` has a hidden class ``k`` with prior ``pi_k``; source ``i`` reports
``l`` with probability ``theta_i[k, l]`` independently of the others. EM alternates
``T_jk ∝ pi_k prod_i theta_i[k, y_ij]`` (over the sources that labelled ``j``) and
``theta_i[k, l] = sum_j T_jk [y_ij = l] / sum_j T_jk [i labelled j]``,
``pi_k = mean_j T_jk`` ("Maximum likelihood estimation of observer
error-rates using the EM algorithm", Applied Statistics 28, 1979). Started from the
majority proportions on each item, so classes keep their meaning.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# Keeps log(0) out of the E-step when a source never made some confusion.
_FLOOR = 1e-9


@dataclass(frozen=True)
class DawidSkeneFit:
    prior: np.ndarray  # (K,)
    confusion: np.ndarray  # (n, K, K): confusion[i, true, reported]
    posterior: np.ndarray  # (m, K)
    iterations: int
    converged: bool

    @property
    def sensitivity(self) -> np.ndarray:
        return self.confusion[:, 1, 1]

    @property
    def specificity(self) -> np.ndarray:
        return self.confusion[:, 0, 0]

    @property
    def balanced_accuracy(self) -> np.ndarray:
        return (self.sensitivity + self.specificity) / 2.0


def dawid_skene(
    labels: np.ndarray, labelled: np.ndarray, n_classes: int = 2, tolerance: float = 1e-6, max_iterations: int = 200
) -> DawidSkeneFit:
    """Fit Dawid-Skene by EM.

    :param labels: ``(n, m)`` integer labels in ``0..n_classes-1`` (ignored where not labelled).
    :param labelled: ``(n, m)`` bool mask; sources may label only some items.
    :param tolerance: stop when no parameter moves by more than this.
    """
    one_hot = np.stack([(labels == k) & labelled for k in range(n_classes)]).astype(np.float64)  # (K, n, m)
    votes = one_hot.sum(axis=1).T  # (m, K)
    totals = votes.sum(axis=1, keepdims=True)
    posterior = np.where(totals > 0, votes / np.maximum(totals, 1), 1.0 / n_classes)

    prior, confusion = _maximise(posterior, one_hot)
    converged, iteration = False, 0
    for iteration in range(1, max_iterations + 1):
        log_posterior = np.log(np.maximum(prior, _FLOOR)) + np.einsum(
            "lnm,nkl->mk", one_hot, np.log(np.maximum(confusion, _FLOOR))
        )
        log_posterior -= log_posterior.max(axis=1, keepdims=True)
        posterior = np.exp(log_posterior)
        posterior /= posterior.sum(axis=1, keepdims=True)
        new_prior, new_confusion = _maximise(posterior, one_hot)
        change = max(np.abs(new_prior - prior).max(), np.abs(new_confusion - confusion).max())
        prior, confusion = new_prior, new_confusion
        if change < tolerance:
            converged = True
            break
    return DawidSkeneFit(prior=prior, confusion=confusion, posterior=posterior, iterations=iteration, converged=converged)


def _maximise(posterior: np.ndarray, one_hot: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    prior = posterior.mean(axis=0)
    counts = np.einsum("mk,lnm->nkl", posterior, one_hot)  # (n, K, K)
    row_totals = counts.sum(axis=2, keepdims=True)
    n_classes = posterior.shape[1]
    confusion = np.where(row_totals > 0, counts / np.maximum(row_totals, 1e-300), 1.0 / n_classes)
    return prior, confusion
