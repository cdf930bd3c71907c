"""Decide one night: analyse, route and render its output files (pure; no store).

The steps of a night and their order live in :mod:`truthsieve.pipeline.night`; the
command line and every Airflow operator call those steps, and the publish step calls
:func:`decide_night`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

from truthsieve.core.draw import draw, key_fingerprint
from truthsieve.core.incentives import SourceIncentive
from truthsieve.core.rules import RuleClass
from truthsieve.pipeline.alerts import compose_alerts
from truthsieve.pipeline.analysis import BatchAnalysis, analyse_batch
from truthsieve.pipeline.config import Config
from truthsieve.pipeline.decision import Decision, build_decision, decision_json
from truthsieve.pipeline.night import DEMO_KEY, Published, draw_key_from_environment, screen_night
from truthsieve.pipeline.night_fit import Fit
from truthsieve.pipeline.output_tables import aggregate_table, sources_table
from truthsieve.pipeline.outputs import dumps_decision, parquet_bytes
from truthsieve.pipeline.records import Intake
from truthsieve.pipeline.report import render_report
from truthsieve.pipeline.revisions import draw_revision
from truthsieve.pipeline.routing import AGGREGATE, REVIEW, route_batch
from truthsieve.pipeline.verdicts import REVIEW_NOTE

__all__ = ["DEMO_KEY", "Decided", "decide_night", "draw_key_from_environment", "screen"]


@dataclass(frozen=True)
class Decided:
    """The decide step's result: the typed decision, the night's output files, the analysis."""

    decision: Decision
    files: dict[str, bytes]
    analysis: BatchAnalysis | None
    as_json: dict  # decision_json(decision), made once


def decide_night(
    intake: Intake,
    config: Config,
    history: Mapping,
    incentives: Sequence[SourceIncentive] | None = None,
    in_force_before: Mapping | None = None,
    previous: Mapping | None = None,
    recent: Sequence[Mapping] | None = None,
    *,
    draw_key: tuple[str, bool] = DEMO_KEY,
    rule_class: RuleClass | None = None,
    fit: Fit | None = None,
) -> Decided:
    """Analyse, route, draw and render one night (pure: no store, no environment).

    :param rule_class: the night's rule class when the caller holds it (the consensus
        step's, in one process); built from the items table when None.
    :param fit: the consensus step's fit when this process holds it with every source's
        sparse labels: the analysis reuses them (:func:`~truthsieve.pipeline.analysis.prepare`).

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
        analysis = analyse_batch(intake.label_codes, intake.items.table, config, history, incentives, rule_class=rule_class, fit=fit)
    route, reasons = route_batch(
        analysis, [s.source_id for s in intake.quarantined], len(intake.valid_sources), config, demo_key, intake.items.valid, revision
    )
    drawn = None if analysis is None else draw([e.probability for e in analysis.mechanism.lottery], key, intake.batch_date, revision)
    decision = build_decision(intake, config, analysis, route, reasons, drawn, demo_key, revision, earlier)
    as_json = decision_json(decision)

    files: dict[str, bytes] = {"decision.json": dumps_decision(as_json)}
    if analysis is not None:
        files["sources.parquet"] = parquet_bytes(sources_table(analysis, decision))
        if route == AGGREGATE:
            files["aggregate.parquet"] = parquet_bytes(aggregate_table(analysis, analysis.mechanism.lottery[drawn.index].rule))
    if route == REVIEW:
        blocking = [r.as_dict() for r in decision.reasons if r.blocking]
        review = {"batch_date": intake.batch_date, "status": "awaiting_review", "blocking_reasons": blocking, "note": REVIEW_NOTE, "verdict": None}
        files["review.json"] = dumps_decision(review)
    alerts = compose_alerts(decision, config, history)
    files["alerts.json"] = dumps_decision({"batch_date": intake.batch_date, "messages": alerts})
    if intake.errors:
        files["quarantine/errors.json"] = dumps_decision({"batch_date": intake.batch_date, "errors": as_json["errors"]})
    files["report.html"] = render_report(decision, analysis, in_force_before, recent, config.routing).encode()
    return Decided(decision, files, analysis, as_json)


def screen(
    inbox: str | Path,
    batch_date: str,
    config: Config,
    out: str | Path,
    lock_timeout: float = 600.0,
    *,
    draw_key: tuple[str, bool] = DEMO_KEY,
    index: bool = False,
    workers: int | None = 1,
) -> Published:
    """Screen one local night and publish it (:func:`~truthsieve.pipeline.night.screen_night`)."""
    from truthsieve.pipeline.store import LocalStore, private_run

    store = LocalStore(Path(inbox), Path(out), run=private_run(), lock_timeout=lock_timeout)
    return screen_night(store, batch_date, config, draw_key, index=index, workers=workers)
