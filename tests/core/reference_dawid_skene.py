"""The dense Dawid-Skene EM as it was before the sparse form: the oracle of
tests/core/test_dawid_skene_sparse.py. It holds the ``(K, n, m)`` float64 one-hot of every
(class, source, item) and runs two ``einsum`` over it per iteration; kept verbatim so the
production fit can be compared float for float."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from truthsieve.core.dawid_skene import DawidSkeneFit, FloatArray, observed_mask

_FLOOR = 1e-9


def dawid_skene(
    labels: npt.ArrayLike,
    labelled: npt.ArrayLike | None = None,
    n_classes: int = 2,
    tolerance: float = 1e-6,
    max_iterations: int = 200,
) -> DawidSkeneFit:
    """Fit Dawid-Skene by EM.

    :param labels: ``(n, m)`` integer class indices in ``0..n_classes-1`` (ignored where not
        labelled; ``-1`` marks a missing label when ``labelled`` is None).
    :param labelled: ``(n, m)`` bool mask; sources may label only some items.
    :param n_classes: ``K``, the number of classes (default 2).
    :param tolerance: stop when no parameter moves by more than this.
    """
    values, mask = observed_mask(labels, labelled, n_classes)
    one_hot = np.stack([(values == k) & mask for k in range(n_classes)]).astype(np.float64)  # (K, n, m)
    votes = one_hot.sum(axis=1).T  # (m, K)
    totals = votes.sum(axis=1, keepdims=True)
    posterior: FloatArray = np.where(totals > 0, votes / np.maximum(totals, 1), 1.0 / n_classes)

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


def _maximise(posterior: FloatArray, one_hot: FloatArray) -> tuple[FloatArray, FloatArray]:
    prior: FloatArray = posterior.mean(axis=0)
    counts = np.einsum("mk,lnm->nkl", posterior, one_hot)  # (n, K, K)
    row_totals = counts.sum(axis=2, keepdims=True)
    n_classes = posterior.shape[1]
    confusion: FloatArray = np.where(row_totals > 0, counts / np.maximum(row_totals, 1e-300), 1.0 / n_classes)
    return prior, confusion
