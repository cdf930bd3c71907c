"""Per-source evidence and flags: disagreement, reliability, agreement, drift, rule shape.

Pure: takes the label matrix, the fits and the sources' own history (earlier batches'
per-source counts) and returns one :class:`SourceReport` per source. Flags are short
codes, each evidence for a human, not a verdict; which flags exist, their thresholds,
defaults and tests are declared once, in :mod:`truthsieve.core.flags` (add a flag there).

K classes (labels ``0..K-1``, ``n_classes`` given explicitly, default 2):

- ``kappa`` is Cohen's kappa over the ``K`` categories against the consensus labels.
- ``balanced_accuracy`` is the Dawid-Skene **macro-averaged recall**
  ``(1/K) sum_k theta_i[k, k]``, not the accuracy against the consensus: for ``K = 2``
  it is exactly the mean of sensitivity and specificity (binary numbers do not move); it
  does not reward reporting the most common class (such a source scores ``1/K``); and
  any report that ignores the true class scores exactly ``1/K``, a chance level known for
  every ``K``. Accuracy against the consensus is published already, as ``1 - disagreement``.
  ``recall`` holds the ``K`` per-class recalls; ``sensitivity`` and ``specificity`` are the
  recalls of classes 1 and 0 (their binary meaning).
- ``positives`` counts labels other than class 0 (for ``K = 2``: the accept count), and
  ``drift_positive_rate`` tests that share; a test of the whole class distribution
  (chi-square over ``K`` classes) would be the fuller check for ``K > 2``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace

import numpy as np
import numpy.typing as npt

from truthsieve.core.agreement import cohen_kappas
from truthsieve.core.dawid_skene import DawidSkeneFit
from truthsieve.core.flags import FLAG_CODES, FLAGS, THRESHOLDS, FlagThresholds, raised_flags
from truthsieve.core.incentives import SourceIncentive
from truthsieve.core.labels import LabelMatrix
from truthsieve.core.sampling import effective_sample_size, holm_adjust, two_proportion_p_value, wilson_interval

__all__ = ["FLAGS", "FLAG_CODES", "THRESHOLDS", "FlagThresholds", "SourceHistory", "SourceReport", "assess_sources"]


@dataclass(frozen=True)
class SourceHistory:
    """Pooled counts from a source's earlier batches in the trailing window."""

    batches: int
    items: int
    positives: int
    disagreements: int


@dataclass(frozen=True)
class SourceReport:
    source_id: str
    weight: float
    items: int
    positives: int
    positive_rate: float
    disagreements: int
    disagreement: float
    disagreement_low: float
    disagreement_high: float
    kappa: float | None
    sensitivity: float
    specificity: float
    balanced_accuracy: float
    incentive: SourceIncentive
    drift_positive_rate_p: float | None
    drift_disagreement_p: float | None
    history_batches: int
    flags: tuple[str, ...] = field(default=())
    recall: tuple[float, ...] = field(default=())  # Dawid-Skene recall of each class 0..K-1


def assess_sources(
    matrix: LabelMatrix,
    consensus_labels: npt.ArrayLike,
    incentives: Sequence[SourceIncentive],
    reliability: DawidSkeneFit,
    history: Mapping[str, SourceHistory],
    thresholds: FlagThresholds,
    n_classes: int | None = None,
) -> list[SourceReport]:
    """Evidence and flags for every source, in source order.

    :param n_classes: ``K``; None takes it from ``reliability`` (the Dawid-Skene fit
        carries a ``K x K`` confusion matrix per source).
    """
    classes = reliability.n_classes if n_classes is None else n_classes
    fitted_labels = np.asarray(consensus_labels).astype(np.int8)
    base: list[tuple[int, str, int, int, int, SourceIncentive, float, float, tuple[float | None, float | None], SourceHistory | None]] = []
    p_values: list[float] = []
    for i, source in enumerate(matrix.source_ids):
        labels = matrix.sources[i]  # the source's own items, increasing: the mask's order
        own = labels.classes
        fitted = fitted_labels[labels.items]
        items = len(labels.items)
        positives = int(np.count_nonzero(own))
        disagreements = int((own != fitted).sum())
        incentive = incentives[i]
        n_effective = effective_sample_size(labels.item_weights)
        low, high = wilson_interval(incentive.disagreement * n_effective, n_effective, thresholds.confidence)
        past = history.get(source)
        drift: tuple[float | None, float | None] = (None, None)
        if past is not None and past.items > 0:
            positive_p = two_proportion_p_value(positives, items, past.positives, past.items)
            disagreement_p = two_proportion_p_value(disagreements, items, past.disagreements, past.items)
            drift = (positive_p, disagreement_p)
            p_values.extend((positive_p, disagreement_p))
        base.append((i, source, items, positives, disagreements, incentive, low, high, drift, past))

    adjusted = iter(holm_adjust(np.array(p_values)) if p_values else [])
    recall = reliability.recall
    own_labels = [labels.classes for labels in matrix.sources]
    kappas = cohen_kappas(
        np.repeat(np.arange(len(own_labels)), [len(c) for c in own_labels]), np.concatenate(own_labels),
        fitted_labels[np.concatenate([labels.items for labels in matrix.sources])], len(own_labels), classes,
    ) if own_labels else []
    reports = []
    for i, source, items, positives, disagreements, incentive, low, high, drift, past in base:
        drift_adjusted = tuple(float(next(adjusted)) if p is not None else None for p in drift)
        report = SourceReport(
            source_id=source,
            weight=float(matrix.source_weights[i]),
            items=items,
            positives=positives,
            positive_rate=positives / items if items else 0.0,
            disagreements=disagreements,
            disagreement=incentive.disagreement,
            disagreement_low=low,
            disagreement_high=high,
            kappa=kappas[i],
            sensitivity=float(reliability.sensitivity[i]),
            specificity=float(reliability.specificity[i]),
            balanced_accuracy=float(reliability.balanced_accuracy[i]),
            incentive=incentive,
            drift_positive_rate_p=drift_adjusted[0],
            drift_disagreement_p=drift_adjusted[1],
            history_batches=past.batches if past else 0,
            recall=tuple(float(r) for r in recall[i]),
        )
        reports.append(replace(report, flags=raised_flags(report, thresholds)))
    return reports
