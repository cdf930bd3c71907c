"""One batch's computation: from validated tables to every number the decision needs.

Pure: no files, no clock. It wires the core together in the order the decision reads:
consensus fit, mechanism, per-source incentives, Dawid-Skene, agreement, flags.

Two paths give the same floats. The whole-night path (:func:`prepare`,
:func:`analyse_batch`) builds the dense label matrix. The split path, for work mapped
by source, never does: :func:`night_items` (items, weights, rule class),
:func:`source_statistics` (one source's sparse labels), :func:`sum_statistics` (the
night's ``(m, K)`` summed costs, in source order), :func:`fit_from_totals` (the
consensus fit) and :func:`analyse_one_source` (one source's incentives from the sum
and its own labels).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from truthsieve.core import mechanisms
from truthsieve.core import statistics as core_statistics
from truthsieve.core.agreement import batch_agreement_of_counts, source_category_counts
from truthsieve.core.dawid_skene import DawidSkeneFit, dawid_skene_sparse
from truthsieve.core.incentives import SourceIncentive, analyse_source, context_from_totals, incentive_context, source_incentive
from truthsieve.core.labels import Labels, LabelMatrix, build_label_matrix, normalised_weights, sorted_items
from truthsieve.core.ids import as_ids, id_array
from truthsieve.core.mechanisms import ConsensusFit, MechanismResult, fit_consensus, run_mechanism
from truthsieve.core.rules import RuleClass, build_rule_class, rule_class_kind
from truthsieve.core.sampling import items_needed
from truthsieve.core.source_checks import SourceHistory, SourceReport, assess_sources
from truthsieve.core.statistics import FloatArray, SourceLabels, label_dtype
from truthsieve.exceptions import ClassIndexError, NoItemsError, NoSourcesError, UnknownReferenceError
from truthsieve.pipeline.config import Config

if TYPE_CHECKING:
    import pandas as pd

    from truthsieve.pipeline.night_fit import Fit


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


def class_count(config: Config, n_classes: int | None = None) -> int:
    """``K``: the explicit ``n_classes``, else the length of ``config.classes``, else 2."""
    if n_classes is not None:
        return n_classes
    return len(config.classes) if config.classes else 2


def prepare(
    labels: Labels,
    items: "pd.DataFrame",
    config: Config,
    *,
    n_classes: int | None = None,
    rule_class: RuleClass | None = None,
    fit: "Fit | None" = None,
) -> tuple[LabelMatrix, RuleClass, ConsensusFit]:
    """The label matrix, the rule class and the consensus fit (labels are class indices).

    :param labels: every valid source's :class:`~truthsieve.core.labels.SourceCodes` (item
        codes into ``items``' rows), or the long label table.
    :param rule_class: the night's rule class when this process already built it
        (:func:`night_items` orders items as the matrix does); built here when None.
    :param fit: the consensus step's :class:`~truthsieve.pipeline.night_fit.Fit` when this
        process holds it with every source's sparse labels (the command line): its
        labels, summed costs, rule class and fit are taken as they are (the same floats),
        nothing is rebuilt or refitted. Ignored when it lacks a source of ``labels``.
    """
    k = class_count(config, n_classes)
    if fit is not None and isinstance(labels, (list, tuple)) and _holds_every_source(fit, labels, k):
        ordered = [fit.sources[source_id] for source_id in sorted(fit.sources)]
        matrix = _matrix_from_sources(ordered, fit.night.item_ids, fit.night.item_weights, k, fit.totals)
        return matrix, fit.rule_class, fit.consensus
    weights = {s.source_id: s.weight for s in config.sources}
    matrix = build_label_matrix(labels, items, weights, n_classes=k)
    if rule_class is None:
        rule_class = build_rule_class(config.rule_class.kind, items, matrix.item_ids, config.rule_class.features, k)
    return matrix, rule_class, fit_consensus(matrix, rule_class)


def _matrix_from_sources(
    sources: Sequence[SourceLabels], item_ids: np.ndarray, item_weights: FloatArray, n_classes: int, global_costs: FloatArray | None = None
) -> LabelMatrix:
    """The :class:`~truthsieve.core.labels.LabelMatrix` of sources already in sparse form
    (one process's fit step holds them): the arrays ``build_label_matrix`` makes from their codes.

    :param sources: every source's labels, sorted by id, weights normalised over them.
    :param global_costs: their summed costs ``sum_i w_i c_i`` when already summed (in
        source order from zeros, as the matrix sums them); not copied, so not to be changed.
    """
    if not sources:
        raise NoSourcesError("no source labelled any item")
    shape = (len(sources), len(item_ids))
    dense_labels, labelled = np.zeros(shape, dtype=label_dtype(n_classes)), np.zeros(shape, dtype=bool)
    for row, source in enumerate(sources):
        dense_labels[row, source.items] = source.classes
        labelled[row, source.items] = True
    weights = np.array([source.weight for source in sources], dtype=np.float64)
    matrix = LabelMatrix(item_ids, tuple(s.source_id for s in sources), dense_labels, labelled, item_weights, weights, n_classes)
    matrix.__dict__["sources"] = tuple(sources)  # the cached property, already computed
    if global_costs is not None:
        matrix.__dict__["_global_costs"] = global_costs
    empty = [s.source_id for s in sources if not s.coverage > 0]
    if empty:
        raise NoItemsError(f"sources labelled no item of positive weight: {', '.join(empty)}")
    return matrix


def _holds_every_source(fit: "Fit", labels: Sequence, n_classes: int) -> bool:
    held = {str(s.source_id) for s in labels}
    return bool(held) and set(fit.sources) == held == set(fit.weights) and fit.rule_class.n_classes == n_classes


@dataclass(frozen=True)
class NightItems:
    """The night's items in code order (sorted ids), their weights and the rule class."""

    item_ids: np.ndarray
    item_weights: FloatArray
    rule_class: RuleClass

    @property
    def n_items(self) -> int:
        return len(self.item_ids)


def night_items(items: "pd.DataFrame", config: Config, *, n_classes: int | None = None) -> NightItems:
    """Item codes, weights and rule class, exactly as :func:`prepare` orders them."""
    item_ids, weights = sorted_items(items)
    k = class_count(config, n_classes)
    rule_class = build_rule_class(config.rule_class.kind, items, item_ids, config.rule_class.features, k)
    return NightItems(item_ids, weights, rule_class)


def source_weights(config: Config, present: Sequence[str]) -> dict[str, float]:
    """Normalised weights of the sources present tonight (the same floats as the matrix's)."""
    ordered = sorted(present)
    registry = {s.source_id: s.weight for s in config.sources}
    return dict(zip(ordered, (float(w) for w in normalised_weights(registry, ordered))))


def source_statistics(labels: "pd.DataFrame", source_id: str, night: NightItems, weight: float) -> SourceLabels:
    """One source's sparse labels from its long rows (``item_id``, ``label`` as class index).

    :param weight: the source's normalised weight (:func:`source_weights`).
    """
    label_items = id_array(labels["item_id"])
    found = pc.index_in(label_items, value_set=pa.array(night.item_ids, pa.string()))
    if found.null_count:
        unknown = label_items.filter(found.is_null())[0].as_py()
        raise UnknownReferenceError(f"label of source {source_id!r} on unknown item {unknown!r}")
    codes = found.to_numpy(zero_copy_only=False)
    classes = labels["label"].to_numpy().astype(np.int64)
    k = night.rule_class.n_classes
    if len(classes) and (classes.min() < 0 or classes.max() >= k):
        raise ClassIndexError(f"source {source_id!r}: a label is not a class index 0..{k - 1}")
    return core_statistics.source_statistics(source_id, codes, classes, night.item_weights, weight)


def item_ranks(items: "pd.DataFrame") -> np.ndarray:
    """Each items-table row's item code (its position in :func:`night_items`' sorted order)."""
    order = np.argsort(as_ids(items["item_id"]), kind="stable")
    ranks = np.empty(len(order), dtype=np.int64)
    ranks[order] = np.arange(len(order))
    return ranks


def source_from_codes(
    source_id: str, rows: np.ndarray, classes: np.ndarray, night: NightItems, ranks: np.ndarray, weight: float
) -> SourceLabels:
    """One source's sparse labels from items-table row positions (the work area's form).

    :param ranks: :func:`item_ranks` of the night's items table.
    :param weight: the source's normalised weight (:func:`source_weights`).
    """
    classes = np.asarray(classes).astype(np.int64)
    k = night.rule_class.n_classes
    if len(classes) and (classes.min() < 0 or classes.max() >= k):
        raise ClassIndexError(f"source {source_id!r}: a label is not a class index 0..{k - 1}")
    return core_statistics.source_statistics(source_id, ranks[np.asarray(rows, dtype=np.int64)], classes, night.item_weights, weight)


def sum_statistics(sources: Sequence[SourceLabels], night: NightItems) -> FloatArray:
    """The night's ``(m, K)`` summed costs; pass the sources in source-id order."""
    return core_statistics.sum_statistics(sorted(sources, key=lambda s: s.source_id), night.n_items, night.rule_class.n_classes)


def fit_from_totals(totals: FloatArray, night: NightItems) -> ConsensusFit:
    """The consensus fit from the summed costs alone."""
    return mechanisms.fit_from_totals(totals, night.rule_class)


def analyse_one_source(
    totals: FloatArray,
    own: SourceLabels,
    night: NightItems,
    consensus: ConsensusFit,
    budget: int | None = None,
    global_linear: FloatArray | None = None,
) -> SourceIncentive:
    """One source's incentive analysis from the summed costs and its own labels only.

    :param global_linear: :func:`~truthsieve.core.incentives.context_from_totals` of
        ``totals``, to share across sources in one process (computed when None).
    """
    if global_linear is None:
        global_linear = context_from_totals(totals, night.rule_class)
    return analyse_source(global_linear, own, night.rule_class, consensus, budget)


def analyse_batch(
    labels: Labels,
    items: "pd.DataFrame",
    config: Config,
    history: Mapping[str, SourceHistory],
    incentives: Sequence[SourceIncentive] | None = None,
    *,
    n_classes: int | None = None,
    rule_class: RuleClass | None = None,
    fit: "Fit | None" = None,
) -> BatchAnalysis:
    """Every number of one batch.

    :param labels: as :func:`prepare` takes them; ``rule_class`` and ``fit`` too.
    :param incentives: per-source results computed elsewhere (e.g. in mapped Airflow
        tasks); computed here when None.
    :param n_classes: ``K`` (default: from ``config.classes``, else 2).
    """
    matrix, rule_class, consensus = prepare(labels, items, config, n_classes=n_classes, rule_class=rule_class, fit=fit)
    if incentives is None:
        budget = config.analysis.incentive_budget
        # The shared global risks are what a lone mapped task computes too: same floats.
        shared = incentive_context(matrix, rule_class)
        incentives = [source_incentive(matrix, rule_class, consensus, i, budget, shared) for i in range(matrix.n_sources)]
    registry_weights = {s.source_id: s.weight for s in config.sources}
    own_rules = {i.source_id: i.own_best_rule for i in incentives}  # the dictators' rules, found already
    mechanism = run_mechanism(config.mechanism, matrix, rule_class, consensus, registry_weights, own_rules)
    reliability = dawid_skene_sparse(
        [(s.items, s.classes) for s in matrix.sources],
        matrix.n_items,
        n_classes=matrix.n_classes,
        tolerance=config.analysis.dawid_skene_tolerance,
        max_iterations=config.analysis.dawid_skene_max_iterations,
    )
    consensus_labels = rule_class.predict(consensus.rule)
    reports = assess_sources(
        matrix, consensus_labels, incentives, reliability, history, config.routing.thresholds(), n_classes=matrix.n_classes
    )
    sparse = [(s.items, s.classes) for s in matrix.sources]
    alpha, fleiss = batch_agreement_of_counts(source_category_counts(sparse, matrix.n_items, matrix.n_classes))
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
    if rule_class_kind(rule_class.kind).grows_with_items:
        return items_needed(n_sources, epsilon, delta, threshold_features=len(config.rule_class.features))
    return items_needed(n_sources, epsilon, delta, finite_size=rule_class.size)
