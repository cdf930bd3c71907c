"""Per-source evidence and flags: disagreement, reliability, agreement, drift, rule shape.

Pure: takes the label matrix, the fits and the sources' own history (earlier batches'
per-source counts) and returns one :class:`SourceReport` per source. Flags are short
codes, each evidence for a human, not a verdict:

============================  ================================================================
``rule_shaped``               one rule of the class fits the source's labels (almost) exactly
                              while it disagrees with the consensus, or while it pulls the
                              fit (a lie that won no longer disagrees): the shape of a
                              best-response report under ERM.
``far_from_consensus``        disagreement with the consensus rule above ``max_disagreement``.
``low_reliability``           Dawid-Skene balanced accuracy below ``min_balanced_accuracy``.
``low_agreement``             Cohen's kappa with the consensus labels below ``min_kappa``.
``gain_from_lying``           the source could lower its risk under plain ERM by at least
                              ``max_gain`` (lower end of the bracket).
``pulls_fit``                 the source's report moves the consensus fit so that the other
                              sources' weighted risk rises by at least ``max_pull``
                              (see :mod:`truthsieve.core.incentives`).
``drift_positive_rate``       positive rate differs from the source's trailing history
                              (two-proportion z-test, Holm-corrected over all tests).
``drift_disagreement``        disagreement rate differs from its trailing history (same test).
============================  ================================================================
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from truthsieve.core.agreement import cohen_kappa
from truthsieve.core.dawid_skene import DawidSkeneFit
from truthsieve.core.incentives import SourceIncentive
from truthsieve.core.labels import LabelMatrix
from truthsieve.core.sampling import effective_sample_size, holm_adjust, two_proportion_p_value, wilson_interval

FLAG_CODES = (
    "rule_shaped",
    "far_from_consensus",
    "low_reliability",
    "low_agreement",
    "gain_from_lying",
    "pulls_fit",
    "drift_positive_rate",
    "drift_disagreement",
)


@dataclass(frozen=True)
class FlagThresholds:
    """Thresholds of the flags (documented in the module docstring)."""

    rule_shape_tolerance: float = 0.01
    rule_shape_min_disagreement: float = 0.05
    max_disagreement: float = 0.2
    min_balanced_accuracy: float = 0.8
    min_kappa: float = 0.5
    max_gain: float = 0.05
    max_pull: float = 0.02
    drift_alpha: float = 0.01
    confidence: float = 0.95


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


def assess_sources(
    matrix: LabelMatrix,
    consensus_labels: np.ndarray,
    incentives: Sequence[SourceIncentive],
    reliability: DawidSkeneFit,
    history: Mapping[str, SourceHistory],
    thresholds: FlagThresholds,
) -> list[SourceReport]:
    """Evidence and flags for every source, in source order."""
    consensus_labels = np.asarray(consensus_labels).astype(np.int8)
    base = []
    p_values = []
    for i, source in enumerate(matrix.source_ids):
        mask = matrix.labelled[i]
        own = matrix.labels[i][mask]
        fitted = consensus_labels[mask]
        items = int(mask.sum())
        positives = int(own.sum())
        disagreements = int((own != fitted).sum())
        incentive = incentives[i]
        n_effective = effective_sample_size(matrix.item_weights[mask])
        low, high = wilson_interval(incentive.disagreement * n_effective, n_effective, thresholds.confidence)
        past = history.get(source)
        drift = (None, None)
        if past is not None and past.items > 0:
            drift = (
                two_proportion_p_value(positives, items, past.positives, past.items),
                two_proportion_p_value(disagreements, items, past.disagreements, past.items),
            )
            p_values.extend(drift)
        base.append((i, source, items, positives, disagreements, incentive, low, high, drift, past))

    adjusted = iter(holm_adjust(np.array(p_values)) if p_values else [])
    reports = []
    for i, source, items, positives, disagreements, incentive, low, high, drift, past in base:
        drift_adjusted = tuple(next(adjusted) if p is not None else None for p in drift)
        kappa = cohen_kappa(matrix.labels[i][matrix.labelled[i]], consensus_labels[matrix.labelled[i]])
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
            kappa=kappa,
            sensitivity=float(reliability.sensitivity[i]),
            specificity=float(reliability.specificity[i]),
            balanced_accuracy=float(reliability.balanced_accuracy[i]),
            incentive=incentive,
            drift_positive_rate_p=drift_adjusted[0],
            drift_disagreement_p=drift_adjusted[1],
            history_batches=past.batches if past else 0,
        )
        reports.append(_with_flags(report, thresholds))
    return reports


def _with_flags(report: SourceReport, t: FlagThresholds) -> SourceReport:
    incentive = report.incentive
    checks = {
        "rule_shaped": incentive.own_best_risk <= t.rule_shape_tolerance
        and (report.disagreement >= t.rule_shape_min_disagreement or incentive.pull >= t.max_pull),
        "far_from_consensus": report.disagreement > t.max_disagreement,
        "low_reliability": report.balanced_accuracy < t.min_balanced_accuracy,
        "low_agreement": report.kappa is not None and report.kappa < t.min_kappa,
        "gain_from_lying": incentive.gain_lower >= t.max_gain,
        "pulls_fit": incentive.pull >= t.max_pull,
        "drift_positive_rate": report.drift_positive_rate_p is not None and report.drift_positive_rate_p < t.drift_alpha,
        "drift_disagreement": report.drift_disagreement_p is not None and report.drift_disagreement_p < t.drift_alpha,
    }
    flags = tuple(code for code in FLAG_CODES if checks[code])
    return SourceReport(**{**report.__dict__, "flags": flags})
