"""The night's Parquet outputs beside ``decision.json``: ``sources.parquet`` and ``aggregate.parquet``."""

from __future__ import annotations

import json
from dataclasses import fields

import pyarrow as pa

from truthsieve.core.statistics import label_dtype
from truthsieve.pipeline.analysis import BatchAnalysis
from truthsieve.pipeline.decision import Decision, SourceEntry

# not a column where they stand: the interval is its two ends, the rules JSON text after the counts
_NOT_COLUMNS = ("disagreement_interval", "own_best_rule", "others_rule", "gain_target_rule")


def sources_table(analysis: BatchAnalysis, decision: Decision) -> pa.Table:
    """``sources.parquet``: one row per source, the decision's numbers plus raw counts."""
    rows = []
    for report, source in zip(analysis.sources, decision.sources):
        row = {f.name: getattr(source, f.name) for f in fields(SourceEntry) if f.name not in _NOT_COLUMNS}
        rows.append({
            **row, "flags": list(source.flags), "positives": report.positives, "disagreements": report.disagreements,
            "disagreement_low": report.disagreement_low, "disagreement_high": report.disagreement_high,
            **{name: json.dumps(getattr(source, name), sort_keys=True) for name in ("own_best_rule", "gain_target_rule", "others_rule")},
            "batch_date": decision.batch_date,
        })
    return pa.Table.from_pylist(rows)


def aggregate_table(analysis: BatchAnalysis, rule: int) -> pa.Table:
    labels = analysis.rule_class.predict(rule).astype(label_dtype(analysis.rule_class.n_classes))  # int8; int16 past 127 classes
    return pa.table({"item_id": pa.array(analysis.matrix.item_ids.tolist(), pa.string()), "label": pa.array(labels)})
