"""The decision of one night: from the validated intake and the analysis to ``decision.json``."""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence

import numpy as np
import pyarrow as pa

from truthsieve import __version__
from truthsieve.core.draw import draw, draw_message
from truthsieve.pipeline.analysis import BatchAnalysis
from truthsieve.pipeline.config import Config
from truthsieve.pipeline.records import Intake


def _rule(analysis: BatchAnalysis, index: int) -> dict:
    return analysis.rule_class.describe(int(index))


def _number(value):
    if value is None:
        return None
    value = float(value)
    return None if not np.isfinite(value) else value


def build_decision(
    intake: Intake,
    config: Config,
    analysis: BatchAnalysis | None,
    route: str,
    reasons,
    key: str,
    demo_key: bool,
    revision: int = 0,
    earlier_draws: Sequence[Mapping] = (),
) -> dict:
    """The contract's ``decision.json`` (plus our own extensions), as a plain dict."""
    decision = {
        "batch_date": intake.batch_date,
        "route": route,
        "reasons": [r.as_dict() for r in reasons],
        "rule_class": {"kind": config.rule_class.kind, "features": list(config.rule_class.features)},
        "shared_inputs": None,
        "consensus": None,
        "mechanism": None,
        "draw": None,
        "sources": [],
        "agreement": {"krippendorff_alpha": None, "fleiss_kappa": None},
        "items_needed": None,
        "n_items": None,
        "inputs": [
            {"path": f.path, "sha256": f.sha256, "rows": f.rows, "valid": f.valid, "source_id": f.source_id}
            for f in sorted(intake.inputs, key=lambda f: f.path)
        ],
        "quarantined": [
            {"source_id": s.source_id, "files": sorted(f.path for f in s.inputs)} for s in intake.quarantined
        ]
        + ([{"source_id": None, "files": [f.path for f in intake.items.inputs]}] if not intake.items.valid else []),
        "errors": [e.as_dict() for e in intake.errors],
        "notes": [n.as_dict() for check in [intake.items, *intake.sources] for n in check.notes],
        "absent": absent_sources(intake, config),
        "config_sha256": config.digest(),
        "draw_revision": revision,
        "earlier_draws": [dict(d) for d in earlier_draws],
        "tool_version": __version__,
    }
    if analysis is None:
        return decision
    mechanism = analysis.mechanism
    drawn = draw([e.probability for e in mechanism.lottery], key, intake.batch_date, revision)
    entry = mechanism.lottery[drawn.index]
    decision.update(
        {
            "rule_class": {**decision["rule_class"], "size": analysis.rule_class.size},
            "shared_inputs": analysis.matrix.shared_inputs,
            "consensus": {"rule": _rule(analysis, analysis.consensus.rule), "risk": analysis.consensus.risk},
            "mechanism": {
                "name": mechanism.name,
                "lottery": [
                    {"source_id": e.source_id, "probability": e.probability, "rule": _rule(analysis, e.rule), "risk": e.risk}
                    for e in mechanism.lottery
                ],
                "expected_risk": mechanism.expected_risk,
                "ratio": _number(mechanism.ratio),
                "guarantee": mechanism.guarantee,
                "guarantee_applies": mechanism.guarantee_applies,
            },
            "draw": {
                "u": drawn.u,
                "revision": revision,
                "message": draw_message(intake.batch_date, revision),
                "index": drawn.index,
                "key_fingerprint": drawn.key_fingerprint,
                "key_source": "demo" if demo_key else "environment",
                "source_id": entry.source_id,
                "rule": _rule(analysis, entry.rule),
            },
            "sources": [_source_entry(analysis, s) for s in analysis.sources],
            "agreement": {"krippendorff_alpha": _number(analysis.krippendorff_alpha), "fleiss_kappa": _number(analysis.fleiss_kappa)},
            "items_needed": analysis.items_needed,
            "n_items": analysis.matrix.n_items,
        }
    )
    return decision


def absent_sources(intake: Intake, config: Config) -> list[dict]:
    """Registered sources without valid labels tonight: ``no_folder`` or ``quarantined``."""
    valid = {s.source_id for s in intake.valid_sources}
    quarantined = {s.source_id for s in intake.quarantined}
    return [
        {"source_id": s, "why": "quarantined" if s in quarantined else "no_folder"}
        for s in sorted(config.registry)
        if s not in valid
    ]


def _source_entry(analysis: BatchAnalysis, s) -> dict:
    incentive = s.incentive
    return {
        "source_id": s.source_id,
        "weight": s.weight,
        "items": s.items,
        "positive_rate": s.positive_rate,
        "disagreement": s.disagreement,
        "disagreement_interval": [s.disagreement_low, s.disagreement_high],
        "own_best_risk": incentive.own_best_risk,
        "own_best_rule": _rule(analysis, incentive.own_best_rule),
        "gain_lower": incentive.gain_lower,
        "gain_upper": incentive.gain_upper,
        "gain_exact": incentive.gain_exact,
        "pull": incentive.pull,
        "others_rule": _rule(analysis, incentive.others_rule),
        "gain_target_rule": _rule(analysis, incentive.target_rule),
        "lie_weight_lower": incentive.lie_weight_lower,
        "lie_weight_upper": incentive.lie_weight_upper,
        "lie_damage": incentive.damage,
        "kappa": _number(s.kappa),
        "sensitivity": s.sensitivity,
        "specificity": s.specificity,
        "balanced_accuracy": s.balanced_accuracy,
        "drift_positive_rate_p": _number(s.drift_positive_rate_p),
        "drift_disagreement_p": _number(s.drift_disagreement_p),
        "history_batches": s.history_batches,
        "flags": list(s.flags),
    }


def sources_table(analysis: BatchAnalysis, decision: Mapping) -> pa.Table:
    """``sources.parquet``: one row per source, the decision's numbers plus raw counts."""
    rows = []
    for report, entry in zip(analysis.sources, decision["sources"]):
        row = {k: v for k, v in entry.items() if not isinstance(v, (dict, list)) or k == "flags"}
        row.update(
            positives=report.positives,
            disagreements=report.disagreements,
            disagreement_low=report.disagreement_low,
            disagreement_high=report.disagreement_high,
            own_best_rule=dumps_rule(entry["own_best_rule"]),
            gain_target_rule=dumps_rule(entry["gain_target_rule"]),
            others_rule=dumps_rule(entry["others_rule"]),
            batch_date=decision["batch_date"],
        )
        rows.append(row)
    return pa.Table.from_pylist(rows)


def dumps_rule(rule: Mapping) -> str:
    return json.dumps(rule, sort_keys=True)


def aggregate_table(analysis: BatchAnalysis, rule: int) -> pa.Table:
    labels = analysis.rule_class.predict(rule).astype(np.int8)
    return pa.table({"item_id": pa.array(analysis.matrix.item_ids.tolist(), pa.string()), "label": pa.array(labels, pa.int8())})
