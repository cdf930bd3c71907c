"""The decision of one night as frozen dataclasses, and its one serialiser to ``decision.json``.

:func:`build_decision` assembles a :class:`Decision` from the validated intake, the
analysis, the route and the draw (performed by the decide step, not here);
:func:`decision_json` is the only place that turns it into the contract's JSON form and
:func:`decision_from_json` the only one that reads a published night back (its inverse);
the Parquet outputs are in :mod:`truthsieve.pipeline.output_tables`. Rules and earlier
draws travel in their JSON form (``RuleClass.describe``), already the contract's shape.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields, is_dataclass

import numpy as np

from truthsieve import __version__
from truthsieve.core.draw import Draw, draw_message
from truthsieve.pipeline.analysis import BatchAnalysis
from truthsieve.pipeline.config import Config
from truthsieve.pipeline.layout import Note
from truthsieve.pipeline.records import ErrorRecord, Intake
from truthsieve.pipeline.routing import Reason


@dataclass(frozen=True)
class InputRecord:
    path: str
    sha256: str
    rows: int | None
    valid: bool
    source_id: str | None


@dataclass(frozen=True)
class Quarantined:
    source_id: str | None
    files: tuple[str, ...]


@dataclass(frozen=True)
class Absent:
    source_id: str
    why: str  # "no_folder" | "quarantined"


@dataclass(frozen=True)
class Consensus:
    rule: dict
    risk: float


@dataclass(frozen=True)
class LotteryChoice:
    source_id: str | None
    probability: float
    rule: dict
    risk: float


@dataclass(frozen=True)
class Mechanism:
    name: str
    lottery: tuple[LotteryChoice, ...]
    expected_risk: float
    ratio: float | None
    guarantee: float
    guarantee_applies: bool


@dataclass(frozen=True)
class DrawnRule:
    u: float
    revision: int
    message: str
    index: int
    key_fingerprint: str
    key_source: str  # "demo" | "environment"
    source_id: str | None
    rule: dict


@dataclass(frozen=True)
class SourceEntry:
    """One source's numbers; the field order is ``sources.parquet``'s column order."""

    source_id: str
    weight: float
    items: int
    positive_rate: float
    disagreement: float
    disagreement_interval: tuple[float, float]
    own_best_risk: float
    own_best_rule: dict
    gain_lower: float
    gain_upper: float
    gain_exact: bool
    pull: float
    others_rule: dict
    gain_target_rule: dict
    lie_weight_lower: float | None
    lie_weight_upper: float | None
    lie_damage: float | None
    kappa: float | None
    sensitivity: float
    specificity: float
    balanced_accuracy: float
    drift_positive_rate_p: float | None
    drift_disagreement_p: float | None
    history_batches: int
    flags: tuple[str, ...]


@dataclass(frozen=True)
class Agreement:
    krippendorff_alpha: float | None = None
    fleiss_kappa: float | None = None


@dataclass(frozen=True)
class Decision:
    """A night's decision; ``consensus``, ``mechanism`` and ``draw`` are None when nothing was fitted."""

    batch_date: str
    route: str
    reasons: tuple[Reason, ...]
    rule_class: dict
    shared_inputs: bool | None
    consensus: Consensus | None
    mechanism: Mechanism | None
    draw: DrawnRule | None
    sources: tuple[SourceEntry, ...]
    agreement: Agreement
    items_needed: int | None
    n_items: int | None
    inputs: tuple[InputRecord, ...]
    quarantined: tuple[Quarantined, ...]
    errors: tuple[ErrorRecord, ...]
    notes: tuple[Note, ...]
    absent: tuple[Absent, ...]
    config_sha256: str
    draw_revision: int
    earlier_draws: tuple[dict, ...]
    tool_version: str
    classes: tuple[str, ...] | None = None  # the configured class names (index order); not written when unset

    @property
    def flagged(self) -> list[str]:
        return [s.source_id for s in self.sources if s.flags]


def _number(value):
    return None if value is None or not np.isfinite(float(value)) else float(value)


def absent_sources(intake: Intake, config: Config) -> tuple[Absent, ...]:
    """Registered sources without valid labels tonight: ``no_folder`` or ``quarantined``."""
    valid = {s.source_id for s in intake.valid_sources}
    quarantined = {s.source_id for s in intake.quarantined}
    return tuple(Absent(s, "quarantined" if s in quarantined else "no_folder") for s in sorted(config.registry) if s not in valid)


def _source_entry(analysis: BatchAnalysis, s) -> SourceEntry:
    rule, incentive = analysis.rule_class.describe, s.incentive
    return SourceEntry(
        s.source_id, s.weight, s.items, s.positive_rate, s.disagreement, (s.disagreement_low, s.disagreement_high),
        incentive.own_best_risk, rule(int(incentive.own_best_rule)), incentive.gain_lower, incentive.gain_upper,
        incentive.gain_exact, incentive.pull, rule(int(incentive.others_rule)), rule(int(incentive.target_rule)),
        incentive.lie_weight_lower, incentive.lie_weight_upper, incentive.damage, _number(s.kappa), s.sensitivity,
        s.specificity, s.balanced_accuracy, _number(s.drift_positive_rate_p), _number(s.drift_disagreement_p),
        s.history_batches, tuple(s.flags),
    )


def build_decision(
    intake: Intake,
    config: Config,
    analysis: BatchAnalysis | None,
    route: str,
    reasons: Sequence[Reason],
    drawn: Draw | None,
    demo_key: bool,
    revision: int = 0,
    earlier_draws: Sequence[Mapping] = (),
) -> Decision:
    """The night's :class:`Decision` (``drawn``: the draw the decide step performed)."""
    rule_class = {"kind": config.rule_class.kind, "features": list(config.rule_class.features)}
    quarantined = [Quarantined(s.source_id, tuple(sorted(f.path for f in s.inputs))) for s in intake.quarantined]
    if not intake.items.valid:
        quarantined.append(Quarantined(None, tuple(f.path for f in intake.items.inputs)))
    common = dict(
        batch_date=intake.batch_date, route=route, reasons=tuple(reasons),
        inputs=tuple(InputRecord(f.path, f.sha256, f.rows, f.valid, f.source_id) for f in sorted(intake.inputs, key=lambda f: f.path)),
        quarantined=tuple(quarantined), errors=tuple(intake.errors), notes=tuple(intake.notes),
        absent=absent_sources(intake, config), config_sha256=config.digest(), draw_revision=revision,
        earlier_draws=tuple(dict(d) for d in earlier_draws), tool_version=__version__,
        classes=None if config.classes is None else tuple(config.classes),
    )
    if analysis is None:
        return Decision(
            rule_class=rule_class, shared_inputs=None, consensus=None, mechanism=None, draw=None, sources=(),
            agreement=Agreement(), items_needed=None, n_items=None, **common,
        )
    describe, result = analysis.rule_class.describe, analysis.mechanism
    mechanism = Mechanism(
        result.name, tuple(LotteryChoice(e.source_id, e.probability, describe(int(e.rule)), e.risk) for e in result.lottery),
        result.expected_risk, _number(result.ratio), result.guarantee, result.guarantee_applies,
    )
    entry = result.lottery[drawn.index]
    draw = DrawnRule(
        drawn.u, revision, draw_message(intake.batch_date, revision), drawn.index, drawn.key_fingerprint,
        "demo" if demo_key else "environment", entry.source_id, describe(int(entry.rule)),
    )
    return Decision(
        rule_class={**rule_class, "size": analysis.rule_class.size}, shared_inputs=analysis.matrix.shared_inputs,
        consensus=Consensus(describe(int(analysis.consensus.rule)), analysis.consensus.risk), mechanism=mechanism, draw=draw,
        sources=tuple(_source_entry(analysis, s) for s in analysis.sources),
        agreement=Agreement(_number(analysis.krippendorff_alpha), _number(analysis.fleiss_kappa)),
        items_needed=analysis.items_needed, n_items=analysis.matrix.n_items, **common,
    )


_FIELD_NAMES: dict[type, tuple[str, ...]] = {}  # per dataclass: its field names, looked up once
_SCALARS = (str, int, float, bool, type(None))


def _plain(value):
    """JSON-ready data: dataclasses as objects in field order, tuples as lists."""
    if type(value) in _SCALARS:  # most values: one type check (1,000 sources: 165,000 of them)
        return value
    if isinstance(value, (Reason, ErrorRecord, Note)):
        return value.as_dict()
    names = _FIELD_NAMES.get(type(value))
    if names is None and is_dataclass(value) and not isinstance(value, type):
        names = _FIELD_NAMES[type(value)] = tuple(f.name for f in fields(value))
    if names is not None:
        return {name: _plain(getattr(value, name)) for name in names}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    return value


def decision_json(decision: Decision) -> dict:
    """The contract's ``decision.json`` (plus our own extensions) as plain data: the one serialiser.

    ``classes`` (the class names, in index order, so rule ``label``/``above``/``below``
    index into it) is written only when the configuration names classes: a binary
    decision keeps its bytes.
    """
    plain = _plain(decision)
    if plain["classes"] is None:
        del plain["classes"]
    return plain


def _record(kind, data: Mapping, **typed):
    """A dataclass from its JSON object: each field's value as it stands, but for ``typed``."""
    return kind(**{f.name: typed[f.name] if f.name in typed else data[f.name] for f in fields(kind)})


_LATER_KEYS = {"absent": [], "notes": [], "earlier_draws": [], "draw_revision": 0, "config_sha256": None}  # what older files mean by lacking them


def decision_from_json(data: Mapping) -> Decision:
    """A parsed ``decision.json`` as the typed :class:`Decision`, :func:`decision_json`'s inverse (a key missing raises KeyError)."""
    data = {**_LATER_KEYS, **data}
    mechanism, classes = data["mechanism"], data.get("classes")
    if mechanism is not None:
        mechanism = _record(Mechanism, mechanism, lottery=tuple(_record(LotteryChoice, x) for x in mechanism["lottery"]))
    return _record(
        Decision, data, reasons=tuple(Reason(**r) for r in data["reasons"]), mechanism=mechanism,
        consensus=None if data["consensus"] is None else _record(Consensus, data["consensus"]),
        draw=None if data["draw"] is None else _record(DrawnRule, data["draw"]), sources=tuple(
            _record(SourceEntry, s, disagreement_interval=tuple(s["disagreement_interval"]), flags=tuple(s["flags"])) for s in data["sources"]
        ),
        agreement=_record(Agreement, data["agreement"]), inputs=tuple(_record(InputRecord, x) for x in data["inputs"]),
        quarantined=tuple(Quarantined(q["source_id"], tuple(q["files"])) for q in data["quarantined"]),
        errors=tuple(_record(ErrorRecord, x) for x in data["errors"]), notes=tuple(_record(Note, n) for n in data["notes"]),
        absent=tuple(_record(Absent, a) for a in data["absent"]), earlier_draws=tuple(data["earlier_draws"]),
        classes=None if classes is None else tuple(classes),
    )
