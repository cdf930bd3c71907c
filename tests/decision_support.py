"""Hand-made typed decisions for the tests of the report, the alerts, the story and the summary.

Every field has a plain default, so a test names only the values its check reads; the
defaults are a night with no fit (nothing to draw) and a source with no flag.
"""

from __future__ import annotations

from dataclasses import replace

from truthsieve.pipeline.decision import Agreement, Consensus, Decision, DrawnRule, LotteryChoice, Mechanism, SourceEntry

RULE = {"kind": "threshold", "feature": "moisture_pct", "cut": 14.05, "above": 0, "below": 1}

_SOURCE = SourceEntry(
    source_id="a", weight=1.0, items=100, positive_rate=0.5, disagreement=0.1, disagreement_interval=(0.05, 0.15),
    own_best_risk=0.1, own_best_rule=RULE, gain_lower=0.0, gain_upper=0.0, gain_exact=True, pull=0.0, others_rule=RULE,
    gain_target_rule=RULE, lie_weight_lower=None, lie_weight_upper=None, lie_damage=None, kappa=0.8, sensitivity=0.9,
    specificity=0.9, balanced_accuracy=0.9, drift_positive_rate_p=None, drift_disagreement_p=None, history_batches=0, flags=(),
)

_DECISION = Decision(
    batch_date="2026-11-03", route="review", reasons=(), rule_class={"kind": "threshold", "features": ["moisture_pct"]},
    shared_inputs=None, consensus=None, mechanism=None, draw=None, sources=(), agreement=Agreement(), items_needed=None,
    n_items=None, inputs=(), quarantined=(), errors=(), notes=(), absent=(), config_sha256="0" * 64, draw_revision=0,
    earlier_draws=(), tool_version="test",
)


def source_entry(source_id: str = "a", **changes) -> SourceEntry:
    """A source with the defaults above; ``flags`` may be given as a list."""
    if "flags" in changes:
        changes["flags"] = tuple(changes["flags"])
    return replace(_SOURCE, source_id=source_id, **changes)


def fitted(rule: dict = RULE, consensus_rule: dict | None = None, source_id: str | None = "a", **changes) -> Decision:
    """A night with a one-entry lottery that drew ``rule`` from ``source_id``; plain ERM fit ``consensus_rule``."""
    mechanism = Mechanism("tuned_dictator", (LotteryChoice(source_id, 1.0, rule, 0.1),), 0.1, 1.0, 1.0, True)
    draw = DrawnRule(0.5, 0, changes.get("batch_date", _DECISION.batch_date), 0, "f" * 16, "demo", source_id, rule)
    return typed_decision(consensus=Consensus(consensus_rule or rule, 0.1), mechanism=mechanism, draw=draw, **changes)


def typed_decision(**changes) -> Decision:
    """A night with the defaults above; tuple fields may be given as lists."""
    return replace(_DECISION, **{k: tuple(v) if isinstance(v, list) else v for k, v in changes.items()})
