"""No reason to lie, end to end: the pipeline's decide step, not just the lottery.

For every source, every possible report and staying away, the source's expected *true*
private risk under the whole pipeline (review keeps the rule in force before the
night) is never lower than when it reports truthfully, in ``strategy_proof`` mode.
The same search finds a profitable misreport in ``guarded`` mode. Exact arithmetic:
risks are Fractions from :mod:`oracle`; only the lottery probabilities come from the
pipeline, and they are checked against the oracle's exact lottery.
"""

from __future__ import annotations

import hashlib
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest

from core_support import FEATURES
from oracle import Instance, all_reports, dictator_lottery, enumerate_rules, own_erm, private_risk, rng_instance, without
from truthsieve.pipeline.config import Config
from truthsieve.pipeline.ingest import FileCheck, InputFile
from truthsieve.pipeline.routing import AGGREGATE
from truthsieve.pipeline.records import Intake
from night_support import decide

DATE = "2026-11-05"


def intake_for(instance: Instance, date: str = DATE) -> Intake:
    """An in-memory intake, as ingest would build it from valid files."""
    labels, items = instance.frames()
    items_file = InputFile(f"batch_date={date}/items.parquet", hashlib.sha256(items.to_csv().encode()).hexdigest(), len(items), None, True)
    intake = Intake(date, FileCheck(None, items, [items_file]))
    for source in instance.sources:
        table = labels[labels["source_id"] == source].reset_index(drop=True)
        table["label"] = table["label"].astype(np.int8)
        digest = hashlib.sha256(table.to_csv().encode()).hexdigest()
        path = f"batch_date={date}/source_id={source}/labels.parquet"
        # As validation holds a source: each label's row in the items table, and its class.
        codes = pd.Index(items["item_id"]).get_indexer(table["item_id"])
        check = FileCheck(source, inputs=[InputFile(path, digest, len(table), source, True)])
        check.labels, check.item_codes = table["label"].to_numpy(), codes
        intake.sources.append(check)
    return intake


def config_for(instance: Instance, kind: str, mechanism: str, registry: dict[str, int], **routing) -> Config:
    return Config.model_validate(
        {
            "rule_class": {"kind": kind, "features": FEATURES if kind == "threshold" else []},
            "mechanism": mechanism,
            "sources": [{"source_id": s, "weight": w} for s, w in registry.items()],
            "routing": routing,
        }
    )


def pipeline_risks(batch: Instance, truth_instance: Instance, source: str, config: Config, in_force_rules) -> list[Fraction]:
    """Expected true private risk of ``source`` after the pipeline decides ``batch``, one
    value per candidate rule in force before the night (what review keeps)."""
    decision, _, analysis = decide(intake_for(batch), config, {})
    truth = truth_instance.labels[source]
    if decision["route"] != AGGREGATE:
        return [private_risk(truth_instance, source, rule, truth) for rule in in_force_rules]
    total = Fraction(0)
    for entry in analysis.mechanism.lottery:
        labelling = tuple(int(v) for v in analysis.rule_class.predict(entry.rule))
        # probabilities are floats of exact rationals (pinned against the oracle below)
        total += Fraction(entry.probability).limit_denominator(10**9) * private_risk(truth_instance, source, labelling, truth)
    return [total] * len(in_force_rules)


def best_deviation(instance: Instance, config: Config, source: str, in_force_rules):
    """Per rule in force: (truthful risk, lowest risk over every report and staying away, how)."""
    truthful = pipeline_risks(instance, instance, source, config, in_force_rules)
    best = [(risk, None) for risk in truthful]
    deviations = [(report, instance.with_report(source, report)) for report in all_reports(instance, source)]
    if len(instance.sources) > 1:
        deviations.append(("away", without(instance, source)))
    for how, batch in deviations:
        risks = pipeline_risks(batch, instance, source, config, in_force_rules)
        best = [(risk, how) if risk < old else (old, old_how) for risk, (old, old_how) in zip(risks, best)]
    return [(t, b, how) for t, (b, how) in zip(truthful, best)]


def mechanisms_for(kind: str) -> list[str]:
    dictators = ["random_dictator", "weighted_dictator", "tuned_dictator"]
    return dictators + (["two_rule_vote", "two_rule_lottery"] if kind == "constant" else [])


CASES = [(kind, seed) for kind in ("constant", "threshold") for seed in range(6)]

# Default thresholds flag nearly every truthful source of a tiny random batch; the
# second policy flags only reports far from the consensus, so a flag that gated the
# route would show up as a profitable misreport.
POLICIES = {"defaults": {}, "one_flag": {
    "max_disagreement": 0.5, "min_kappa": -1.0, "min_balanced_accuracy": 0.0, "rule_shape_tolerance": 0.0,
    "rule_shape_min_disagreement": 1.0, "max_gain": 1.0, "max_pull": 1.0,
}}


@pytest.mark.parametrize("policy", sorted(POLICIES))
@pytest.mark.parametrize(("kind", "seed"), CASES)
def test_no_report_and_no_absence_pays_in_strategy_proof_mode(kind, seed, policy, monkeypatch):
    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    rng = np.random.default_rng(7000 + seed)
    instance = rng_instance(rng, 2 + seed % 3, 3 + (seed // 2) % 3, bool(seed % 2 == 0), kind)  # 2-4 sources, 3-5 items
    registry = dict(instance.source_weights)
    if seed % 3 == 0:
        registry["src-registered-away"] = 2  # registered, never present
    features = FEATURES if kind == "threshold" else []
    rules = [labelling for _, labelling in enumerate_rules(instance, kind, features)]
    for mechanism in mechanisms_for(kind):
        config = config_for(instance, kind, mechanism, registry, **POLICIES[policy])
        if mechanism.endswith("dictator"):
            _, _, analysis = decide(intake_for(instance), config, {})
            exact = dictator_lottery(instance, mechanism, kind, features, registry)
            assert [e.probability for e in analysis.mechanism.lottery] == pytest.approx([float(p) for _, p, _ in exact], abs=1e-12)
        for source in instance.sources:
            # the rule in force before the night: the constants, the last rule, and the
            # source's own best rule (what it would most like review to keep)
            in_force_choices = [rules[0], rules[1], rules[-1], own_erm(instance, kind, features, source)[1]]
            for truthful, best, how in best_deviation(instance, config, source, in_force_choices):
                assert best == truthful, (mechanism, source, how)


def guarded_instance() -> Instance:
    """Constant class, five lots, equal weights. A and B reject all; X accepts lots 0-2.

    Truthful: consensus all-0 (R = (0 + 0 + 3/5)/3 = 1/5), X's disagreement 3/5 stays
    under the policy's 0.7, so the night aggregates the random dictator's lottery
    (all-0, all-0, all-1 for X's own best rule): X's expected risk
    2/3 * 3/5 + 1/3 * 2/5 = 8/15. Reporting "accept all" makes X's disagreement 1 >
    0.7, the flag sends the night to review, and the rule in force (all-1) stays:
    X's risk 2/5 < 8/15.
    """
    return Instance(
        n_items=5,
        labels={"A": dict.fromkeys(range(5), 0), "B": dict.fromkeys(range(5), 0), "X": {0: 1, 1: 1, 2: 1, 3: 0, 4: 0}},
        source_weights={"A": 1, "B": 1, "X": 1},
        item_weights=(1,) * 5,
    )


def test_guarded_mode_pays_a_misreport(monkeypatch):
    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    instance = guarded_instance()
    routing = {"mode": "guarded", "review_on_flags": ["far_from_consensus"], "max_disagreement": 0.7, "max_ratio": 2.5}
    guarded = config_for(instance, "constant", "random_dictator", instance.source_weights, **routing)
    in_force = (1,) * 5
    ((truthful, best, how),) = best_deviation(instance, guarded, "X", [in_force])
    assert truthful == Fraction(8, 15)
    assert best == Fraction(2, 5)
    assert how != "away" and sum(how.values()) > 3  # it over-reports accepts to get flagged

    # The same instance and thresholds in strategy_proof mode: the flag is advisory.
    fair = config_for(instance, "constant", "random_dictator", instance.source_weights, **{**routing, "mode": "strategy_proof"})
    ((truthful, best, _),) = best_deviation(instance, fair, "X", [in_force])
    assert best == truthful == Fraction(8, 15)
