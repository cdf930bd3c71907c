"""Dawid-Skene: each source's K x K confusion matrix and each item's class posterior by EM.

Model: item ``j`` has a hidden class ``k`` in ``0..K-1`` with prior ``pi_k``; source ``i``
reports ``l`` with probability ``theta_i[k, l]`` independently of the others. EM alternates
``T_jk ∝ pi_k prod_i theta_i[k, y_ij]`` (over the sources that labelled ``j``) and
``theta_i[k, l] = sum_j T_jk [y_ij = l] / sum_j T_jk [i labelled j]``,
``pi_k = mean_j T_jk`` ("Maximum likelihood estimation of observer
error-rates using the EM algorithm", Applied Statistics 28, 1979). Started from the
majority proportions on each item, so classes keep their meaning.

:func:`dawid_skene_sparse` fits from each source's observed ``(items, classes)`` alone
(the pipeline's form); past :data:`DENSE_CELLS` one-hot cells it never builds a
``(K, n, m)`` array, and it adds every sum in the dense fit's order, so the floats are
the same either way.

Labels are class indices ``0..K-1``; a missing label is marked by the ``labelled`` mask
or, when no mask is given, by ``-1``. ``K`` is given explicitly (default 2), so a class
that nobody reported tonight still has its row and column.

Per-source summary: :attr:`DawidSkeneFit.balanced_accuracy` is the **macro-averaged
recall** ``(1/K) sum_k theta_i[k, k]``. Chosen over the accuracy against the consensus
because (1) for ``K = 2`` it is exactly the mean of sensitivity and specificity, the
balanced accuracy the contract publishes, so binary numbers do not move; (2) it does not
depend on how common each class is: a source that always reports the most common of four
classes scores ``1/4``, not that class's share; (3) any source whose report ignores the
true class (``theta_i[k, :]`` the same for every ``k``) scores exactly ``1/K``, so the
chance level is known for every ``K``. The accuracy against the consensus rule is already
published as ``1 - disagreement``.

>>> import numpy as np
>>> labels = np.array([[0, 1, 2, 2], [0, 1, 2, -1], [0, 1, 1, 2]])
>>> fit = dawid_skene(labels, n_classes=3)
>>> fit.confusion.shape, fit.posterior.shape
((3, 3, 3), (4, 3))
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from truthsieve.core.dawid_skene_terms import FloatArray, OneHot, Terms

# Keeps log(0) out of the E-step when a source never made some confusion.
_FLOOR = 1e-9


@dataclass(frozen=True)
class DawidSkeneFit:
    prior: FloatArray  # (K,)
    confusion: FloatArray  # (n, K, K): confusion[i, true, reported]
    posterior: FloatArray  # (m, K)
    iterations: int
    converged: bool

    @property
    def n_classes(self) -> int:
        return int(self.prior.shape[0])

    @property
    def recall(self) -> FloatArray:
        """``(n, K)``: ``theta_i[k, k]``, the share of class-``k`` items source ``i`` reports as ``k``."""
        return np.diagonal(self.confusion, axis1=1, axis2=2).copy()

    @property
    def sensitivity(self) -> FloatArray:
        """Recall of class 1 (the binary name; for ``K > 2`` see :attr:`recall`)."""
        return self.confusion[:, 1, 1]

    @property
    def specificity(self) -> FloatArray:
        """Recall of class 0 (the binary name; for ``K > 2`` see :attr:`recall`)."""
        return self.confusion[:, 0, 0]

    @property
    def macro_recall(self) -> FloatArray:
        """``(1/K) sum_k theta_i[k, k]`` per source (see the module docstring for why)."""
        if self.n_classes == 2:
            # The binary formula, term for term: binary numbers stay bit-identical.
            return (self.sensitivity + self.specificity) / 2.0
        mean: FloatArray = self.recall.mean(axis=1)
        return mean

    @property
    def balanced_accuracy(self) -> FloatArray:
        """The published per-source reliability: :attr:`macro_recall` (for ``K = 2`` the
        mean of sensitivity and specificity)."""
        return self.macro_recall


def observed_mask(
    labels: npt.ArrayLike, labelled: npt.ArrayLike | None, n_classes: int
) -> tuple[npt.NDArray[Any], npt.NDArray[np.bool_]]:
    """``(labels, mask)`` with missing labels marked by ``labelled`` or, when None, by ``-1``.

    :raises ValueError: an observed label outside ``0..n_classes-1``, or ``n_classes < 2``.
    """
    if n_classes < 2:
        raise ValueError(f"n_classes must be at least 2, got {n_classes}")
    values = np.asarray(labels)
    mask = values >= 0 if labelled is None else np.asarray(labelled, dtype=bool)
    if mask.shape != values.shape:
        raise ValueError(f"labels have shape {values.shape} but the labelled mask has shape {mask.shape}")
    observed = values[mask]
    if observed.size and (observed.min() < 0 or observed.max() >= n_classes):
        bad = observed[(observed < 0) | (observed >= n_classes)][0]
        raise ValueError(f"label {bad!r} is not a class index in 0..{n_classes - 1}")
    return values, mask


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
    if values.ndim != 2:
        raise ValueError(f"labels must be a sources x items matrix, got shape {values.shape}")
    sources = []
    for row, seen in zip(values, mask):
        items = np.flatnonzero(seen)
        sources.append((items, row[items]))
    return dawid_skene_sparse(sources, values.shape[1], n_classes, tolerance, max_iterations)


#: Up to this many one-hot cells (``K n m``; 64 MiB of float64) the fit holds the dense
#: ``(K, n, m)`` one-hot, whose two ``einsum`` per iteration are the fastest form; above
#: it, only the observed labels (:class:`~truthsieve.core.dawid_skene_terms.Terms`). Both give the same floats.
DENSE_CELLS = 2**23


def dawid_skene_sparse(
    sources: Sequence[tuple[npt.ArrayLike, npt.ArrayLike]],
    n_items: int,
    n_classes: int = 2,
    tolerance: float = 1e-6,
    max_iterations: int = 200,
    dense_cells: int = DENSE_CELLS,
) -> DawidSkeneFit:
    """:func:`dawid_skene` from each source's observed labels: no ``(n, m)`` matrix needed.

    :param sources: per source, in source order, ``(items, classes)``: the item codes it
        labelled (increasing, unique, in ``0..n_items-1``) and its class index on each.
    :param n_items: ``m``.
    :param dense_cells: the largest ``K n m`` fitted with the dense one-hot (see
        :data:`DENSE_CELLS`); above it the E-step sums each item's terms over its own
        labels only, O(K |labels|) per iteration, and the M-step holds one source's
        ``(K, 1, m)`` indicator at a time.

    Every sum adds its terms in exactly the order of the dense one-hot ``einsum`` (an
    item's terms by class, then by source; a confusion count with the same ``einsum``
    kernel on the same memory layout), so both forms give the same floats.
    """
    if n_classes < 2:
        raise ValueError(f"n_classes must be at least 2, got {n_classes}")
    observed = []
    for items, classes in sources:
        codes, values = np.asarray(items, dtype=np.int64), np.asarray(classes)
        if not np.issubdtype(values.dtype, np.integer):
            values = values.astype(np.int64)
        if codes.shape != values.shape or codes.ndim != 1:
            raise ValueError("each source needs one class index per item code")
        if len(values) and (values.min() < 0 or values.max() >= n_classes):
            bad = values[(values < 0) | (values >= n_classes)][0]
            raise ValueError(f"label {bad!r} is not a class index in 0..{n_classes - 1}")
        if len(codes) and (codes[0] < 0 or codes[-1] >= n_items or (codes[1:] <= codes[:-1]).any()):
            raise ValueError("item codes must be increasing and in 0..n_items-1")
        observed.append((codes, values))
    cells = n_classes * len(observed) * n_items
    terms: OneHot | Terms = OneHot(observed, n_items, n_classes) if cells <= dense_cells else Terms(observed, n_items, n_classes)
    # votes is the transpose of a (K, m) array, so (m, K) in column order, as in the dense
    # fit: the layout decides the order of later reductions, so it is kept throughout.
    votes = terms.votes.T
    totals = votes.sum(axis=1, keepdims=True)
    posterior: FloatArray = np.where(totals > 0, votes / np.maximum(totals, 1), 1.0 / n_classes)

    prior, confusion = _maximise(posterior, terms.counts(posterior))
    converged, iteration = False, 0
    for iteration in range(1, max_iterations + 1):
        log_posterior = np.log(np.maximum(prior, _FLOOR)) + terms.log_likelihood(np.log(np.maximum(confusion, _FLOOR))).T
        log_posterior -= log_posterior.max(axis=1, keepdims=True)
        posterior = np.exp(log_posterior)
        posterior /= posterior.sum(axis=1, keepdims=True)
        new_prior, new_confusion = _maximise(posterior, terms.counts(posterior))
        change = max(np.abs(new_prior - prior).max(), np.abs(new_confusion - confusion).max())
        prior, confusion = new_prior, new_confusion
        if change < tolerance:
            converged = True
            break
    return DawidSkeneFit(prior=prior, confusion=confusion, posterior=posterior, iterations=iteration, converged=converged)


def _maximise(posterior: FloatArray, counts: FloatArray) -> tuple[FloatArray, FloatArray]:
    prior: FloatArray = posterior.mean(axis=0)
    row_totals = counts.sum(axis=2, keepdims=True)
    n_classes = posterior.shape[1]
    confusion: FloatArray = np.where(row_totals > 0, counts / np.maximum(row_totals, 1e-300), 1.0 / n_classes)
    return prior, confusion
