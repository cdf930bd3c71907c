"""Screen one nightly batch end to end: ingest, analyse, route, publish.

The command line and the Airflow operators both call these functions, so a batch
screened either way gives the same ``decision.json`` byte for byte.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa

from truthsieve import __version__
from truthsieve.core.draw import DEMO_DRAW_KEY, DRAW_KEY_VARIABLE, draw, draw_message, key_fingerprint
from truthsieve.core.incentives import SourceIncentive
from truthsieve.exceptions import InputError
from truthsieve.pipeline import ingest
from truthsieve.pipeline.alerts import compose_alerts
from truthsieve.pipeline.analysis import BatchAnalysis, analyse_batch
from truthsieve.pipeline.config import Config
from truthsieve.pipeline.outputs import (
    date_lock,
    dumps_decision,
    parquet_bytes,
    publish,
    read_history,
    recover,
)
from truthsieve.pipeline.report import render_report
from truthsieve.pipeline.report_history import recent_nights
from truthsieve.pipeline.revisions import draw_revision, read_published_decision
from truthsieve.pipeline.routing import AGGREGATE, REVIEW, route_batch
from truthsieve.pipeline.verdicts import REVIEW_NOTE, in_force_before, record_publication


@dataclass
class Intake:
    """What one night's inbox held after validation."""

    batch_date: str
    items: ingest.FileCheck
    sources: list[ingest.FileCheck] = field(default_factory=list)

    @property
    def valid_sources(self) -> list[ingest.FileCheck]:
        return [s for s in self.sources if s.valid]

    @property
    def quarantined(self) -> list[ingest.FileCheck]:
        return [s for s in self.sources if not s.valid]

    @property
    def labels(self) -> pd.DataFrame:
        frames = [s.table for s in self.valid_sources]
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=["item_id", "source_id", "label"])

    @property
    def errors(self) -> list[ingest.ErrorRecord]:
        return [e for check in [self.items, *self.sources] for e in check.errors]

    @property
    def inputs(self) -> list[ingest.InputFile]:
        return [f for check in [self.items, *self.sources] for f in check.inputs]


#: (key, is_demo_key) of the public demo key, used when an edge passes no secret.
DEMO_KEY = (DEMO_DRAW_KEY, True)


def draw_key_from_environment(environ: Mapping[str, str]) -> tuple[str, bool]:
    """(key, is_demo_key): the secret in ``TRUTHSIEVE_DRAW_KEY``, or the public demo key.

    Only the edges (the command line, the Airflow operator) call this and pass the key
    down; nothing below them reads the environment.
    """
    key = environ.get(DRAW_KEY_VARIABLE)
    return (key, False) if key else DEMO_KEY


def ingest_batch(inbox: str | Path, batch_date: str, config: Config) -> Intake:
    """Validate the items table and every source folder of one night."""
    folder = ingest.batch_folder(inbox, batch_date)
    if not folder.is_dir():
        raise InputError(f"{folder}: no such batch folder")
    items = validate_items(inbox, batch_date, config)
    item_ids, weights = item_index(items)
    intake = Intake(batch_date, items)
    for source_folder in ingest.source_folders(inbox, batch_date):
        intake.sources.append(ingest.validate_source(inbox, source_folder, config.registry, item_ids, weights))
    return intake


def validate_items(inbox, batch_date: str, config: Config) -> ingest.FileCheck:
    """Validate the night's items table against the configured rule class."""
    kind = config.rule_class.kind
    return ingest.validate_items(inbox, batch_date, config.rule_class.features, kind == "listed", kind)


def item_index(items: ingest.FileCheck) -> tuple[object, np.ndarray | None]:
    """(item ids, item weights) that every source's labels are checked against; None when
    the items table is invalid."""
    if not items.valid:
        return None, None
    item_ids = ingest.id_array(items.table["item_id"])
    if "item_weight" in items.table:
        return item_ids, items.table["item_weight"].to_numpy(dtype=np.float64)
    return item_ids, np.ones(len(item_ids))


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


def decide(
    intake: Intake,
    config: Config,
    history: Mapping,
    incentives: Sequence[SourceIncentive] | None = None,
    in_force_before: Mapping | None = None,
    previous: Mapping | None = None,
    recent: Sequence[Mapping] | None = None,
    *,
    draw_key: tuple[str, bool] = DEMO_KEY,
) -> tuple[dict, dict[str, bytes], BatchAnalysis | None]:
    """Analyse, route and render one batch: returns (decision, output files, analysis).

    :param in_force_before: the rule in force before this night (see
        :func:`truthsieve.pipeline.verdicts.in_force_before`); only the report reads it.
    :param previous: the decision already published for this date, if any (see
        :func:`draw_revision`).
    :param draw_key: (secret, is_demo_key) from :func:`draw_key_from_environment`.
    """
    key, demo_key = draw_key
    revision, earlier = draw_revision(previous, intake, config.digest(), key_fingerprint(key))
    analysis = None
    if intake.items.valid and intake.valid_sources:
        analysis = analyse_batch(intake.labels, intake.items.table, config, history, incentives)
    route, reasons = route_batch(
        analysis, [s.source_id for s in intake.quarantined], len(intake.valid_sources), config, demo_key, intake.items.valid, revision
    )
    decision = build_decision(intake, config, analysis, route, reasons, key, demo_key, revision, earlier)

    files: dict[str, bytes] = {"decision.json": dumps_decision(decision)}
    if analysis is not None:
        files["sources.parquet"] = parquet_bytes(sources_table(analysis, decision))
        if route == AGGREGATE:
            drawn = analysis.mechanism.lottery[decision["draw"]["index"]]
            files["aggregate.parquet"] = parquet_bytes(aggregate_table(analysis, drawn.rule))
    if route == REVIEW:
        review = {
            "batch_date": intake.batch_date,
            "status": "awaiting_review",
            "blocking_reasons": [r for r in decision["reasons"] if r["blocking"]],
            "note": REVIEW_NOTE,
            "verdict": None,
        }
        files["review.json"] = dumps_decision(review)
    alerts = compose_alerts(decision, config, history)
    files["alerts.json"] = dumps_decision({"batch_date": intake.batch_date, "messages": alerts})
    if intake.errors:
        files["quarantine/errors.json"] = dumps_decision({"batch_date": intake.batch_date, "errors": decision["errors"]})
    files["report.html"] = render_report(decision, analysis, in_force_before, recent, config.routing).encode()
    return decision, files, analysis


def quarantine_copies(inbox, intake: Intake) -> dict[str, bytes]:
    """Byte copies of every invalid input file, under ``quarantine/`` by inbox-relative path:
    the bytes validated, never a file re-read through a link leaving the inbox."""
    copies = {}
    for check in [intake.items, *intake.quarantined]:
        if check.valid:
            continue
        for path, data in ingest.quarantine_bytes(inbox, check).items():
            relative = Path(path).relative_to(f"batch_date={intake.batch_date}")
            copies[f"quarantine/{relative.as_posix()}"] = data
    return copies


@dataclass(frozen=True)
class ScreenResult:
    batch_date: str
    decision: dict
    output: Path

    @property
    def route(self) -> str:
        return self.decision["route"]


def screen(
    inbox: str | Path,
    batch_date: str,
    config: Config,
    out: str | Path,
    lock_timeout: float = 600.0,
    *,
    draw_key: tuple[str, bool] = DEMO_KEY,
) -> ScreenResult:
    """Screen one night and publish its outputs atomically (``draw_key`` as in :func:`decide`)."""
    intake = ingest_batch(inbox, batch_date, config)
    Path(out).mkdir(parents=True, exist_ok=True)
    with date_lock(out, batch_date, lock_timeout):
        recover(out, batch_date)
        history = read_history(out, batch_date, config.routing.drift_window)
        decision, files, _ = decide(
            intake, config, history,
            in_force_before=in_force_before(out, batch_date),
            previous=read_published_decision(out, batch_date),
            draw_key=draw_key,
            recent=recent_nights(out, batch_date),
        )
        files.update(quarantine_copies(inbox, intake))
        output = publish(out, batch_date, files)
        record_publication(out, batch_date, files["decision.json"], lock_timeout)
    return ScreenResult(batch_date, decision, output)
