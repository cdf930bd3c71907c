"""One batch's computation: from validated tables to every number the decision needs.

Pure: no files, no clock. It wires the core together in the order the decision reads:
consensus fit, mechanism, per-source incentives, Dawid-Skene, agreement, flags.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from truthsieve.core.agreement import fleiss_kappa, krippendorff_alpha_nominal
from truthsieve.core.dawid_skene import DawidSkeneFit, dawid_skene
from truthsieve.core.incentives import SourceIncentive, incentive_context, source_incentive
from truthsieve.core.labels import LabelMatrix, build_label_matrix
from truthsieve.core.mechanisms import ConsensusFit, MechanismResult, fit_consensus, run_mechanism
from truthsieve.core.rules import RuleClass, build_rule_class
from truthsieve.core.sampling import items_needed
from truthsieve.core.source_checks import SourceHistory, SourceReport, assess_sources
from truthsieve.pipeline.config import Config


@dataclass(frozen=True)
class BatchAnalysis:
    matrix: LabelMatrix
    rule_class: RuleClass
    consensus: ConsensusFit
    consensus_labels: np.ndarray
    mechanism: MechanismResult
    reliability: DawidSkeneFit
    sources: list[SourceReport]
    krippendorff_alpha: float | None
    fleiss_kappa: float | None
    items_needed: int


def prepare(labels: pd.DataFrame, items: pd.DataFrame, config: Config) -> tuple[LabelMatrix, RuleClass, ConsensusFit]:
    """The label matrix, the rule class and the consensus fit."""
    weights = {s.source_id: s.weight for s in config.sources}
    matrix = build_label_matrix(labels, items, weights)
    rule_class = build_rule_class(config.rule_class.kind, items, matrix.item_ids, config.rule_class.features)
    return matrix, rule_class, fit_consensus(matrix, rule_class)


def agreement(matrix: LabelMatrix) -> tuple[float | None, float | None]:
    """(Krippendorff's alpha over all labels, Fleiss' kappa when every item has equal counts)."""
    ratings = np.where(matrix.labelled, matrix.labels.astype(np.float64), np.nan)
    ones = (matrix.labelled & (matrix.labels == 1)).sum(axis=0)
    zeros = (matrix.labelled & (matrix.labels == 0)).sum(axis=0)
    return krippendorff_alpha_nominal(ratings), fleiss_kappa(np.stack([zeros, ones], axis=1))


def analyse_batch(
    labels: pd.DataFrame,
    items: pd.DataFrame,
    config: Config,
    history: Mapping[str, SourceHistory],
    incentives: Sequence[SourceIncentive] | None = None,
) -> BatchAnalysis:
    """Every number of one batch.

    :param incentives: per-source results computed elsewhere (e.g. in mapped Airflow
        tasks); computed here when None.
    """
    matrix, rule_class, consensus = prepare(labels, items, config)
    if incentives is None:
        budget = config.analysis.incentive_budget
        # The shared global risks are what a lone mapped task computes too: same floats.
        shared = incentive_context(matrix, rule_class)
        incentives = [source_incentive(matrix, rule_class, consensus, i, budget, shared) for i in range(matrix.n_sources)]
    registry_weights = {s.source_id: s.weight for s in config.sources}
    mechanism = run_mechanism(config.mechanism, matrix, rule_class, consensus, registry_weights)
    reliability = dawid_skene(
        matrix.labels,
        matrix.labelled,
        tolerance=config.analysis.dawid_skene_tolerance,
        max_iterations=config.analysis.dawid_skene_max_iterations,
    )
    consensus_labels = rule_class.predict(consensus.rule)
    reports = assess_sources(matrix, consensus_labels, incentives, reliability, history, config.routing.thresholds())
    alpha, fleiss = agreement(matrix)
    return BatchAnalysis(
        matrix=matrix,
        rule_class=rule_class,
        consensus=consensus,
        consensus_labels=consensus_labels,
        mechanism=mechanism,
        reliability=reliability,
        sources=reports,
        krippendorff_alpha=alpha,
        fleiss_kappa=fleiss,
        items_needed=items_needed_for(matrix.n_sources, rule_class, config),
    )


def items_needed_for(n_sources: int, rule_class: RuleClass, config: Config) -> int:
    """:func:`~truthsieve.core.sampling.items_needed` for the configured class."""
    epsilon, delta = config.analysis.sample_epsilon, config.analysis.sample_delta
    if rule_class.kind == "threshold":
        return items_needed(n_sources, epsilon, delta, threshold_features=len(config.rule_class.features))
    return items_needed(n_sources, epsilon, delta, finite_size=rule_class.size)
