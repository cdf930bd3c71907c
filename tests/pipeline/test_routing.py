"""Routing modes, the configuration rules that go with them, and draw revisions."""

from __future__ import annotations

import json

import numpy as np
import pytest

from oracle import Instance, without
from test_strategy_proof import config_for, intake_for
from truthsieve.core.draw import DEMO_DRAW_KEY, inverse_cdf, uniform_from_date
from truthsieve.exceptions import ConfigError
from truthsieve.pipeline.config import Config, load_config
from truthsieve.pipeline.ingest import ErrorRecord
from truthsieve.pipeline.outputs import dumps_decision
from truthsieve.pipeline.screen import screen
from night_support import decide

from inboxes import write_batch, write_config, write_labels

DATE = "2026-11-05"


def three_sources() -> Instance:
    """Constant class, four lots: A rejects all, B accepts all, C accepts lots 0-2."""
    return Instance(
        n_items=4,
        labels={"A": dict.fromkeys(range(4), 0), "B": dict.fromkeys(range(4), 1), "C": {0: 1, 1: 1, 2: 1, 3: 0}},
        source_weights={"A": 2, "B": 1, "C": 1},
        item_weights=(1,) * 4,
    )


def test_erm_with_strategy_proof_mode_is_a_configuration_error(tmp_path):
    path = write_config(tmp_path / "c.yaml", mechanism="erm")
    with pytest.raises(ConfigError) as error:
        load_config(path)
    assert "mechanism" in str(error.value) and "routing.mode" in str(error.value)
    guarded = write_config(tmp_path / "g.yaml", mechanism="erm", routing={"mode": "guarded"})
    assert load_config(guarded).routing.mode == "guarded"


def test_defaults_are_strategy_proof_with_one_valid_source():
    config = config_for(three_sources(), "constant", "tuned_dictator", {"A": 2, "B": 1, "C": 1})
    assert config.routing.mode == "strategy_proof"
    assert config.routing.min_valid_sources == 1
    assert config.routing.ratio_bound == 3.0
    assert config_for(three_sources(), "constant", "tuned_dictator", {"A": 1}, mode="guarded").routing.ratio_bound == 2.0


def test_flags_and_quarantine_never_block_in_strategy_proof_mode(monkeypatch):
    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    instance = three_sources()
    config = config_for(instance, "constant", "random_dictator", instance.source_weights)
    intake = intake_for(instance)
    broken = intake.sources.pop()  # C sends a broken file
    broken.errors.append(ErrorRecord(broken.inputs[0].path, 3, "label", "label_values", "label 2 is not 0 or 1"))
    intake.sources.append(broken)
    decision, _, _ = decide(intake, config, {})
    assert decision["route"] == "aggregate"
    codes = {r["code"]: r["blocking"] for r in decision["reasons"]}
    assert codes["source_quarantined"] is False
    assert any(r["code"] == "source_noted" for r in decision["reasons"])  # A and B disagree: flags are noted
    assert not any(r["blocking"] for r in decision["reasons"])

    guarded = config_for(instance, "constant", "random_dictator", instance.source_weights, mode="guarded")
    decision, _, _ = decide(intake, guarded, {})
    assert decision["route"] == "review"
    assert {r["code"] for r in decision["reasons"] if r["blocking"]} >= {"source_quarantined", "source_flagged"}


def test_max_ratio_gates_only_on_the_registry_guarantee(monkeypatch):
    """random_dictator with registry weights 1, 3, 3: w_min = 1/7, so the guarantee is
    1 + 2 (1 - 1/7) / (3 * 1/7) = 1 + 4 = 5 with everyone present: above 3, every night
    goes to review whatever the labels; with max_ratio 5 none does."""
    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    instance = three_sources()
    registry = {"A": 1, "B": 3, "C": 3}
    config = config_for(instance, "constant", "random_dictator", registry)
    for batch in (instance, without(instance, "A"), instance.with_report("A", dict.fromkeys(range(4), 1))):
        decision, _, _ = decide(intake_for(batch), config, {})
        assert decision["route"] == "review"
        assert [r["code"] for r in decision["reasons"] if r["blocking"]] == ["guarantee_above_bound"]
    relaxed = config_for(instance, "constant", "random_dictator", registry, max_ratio=5.0)
    assert decide(intake_for(instance), relaxed, {})[0]["route"] == "aggregate"


def test_config_digest_is_recorded_and_changes_with_the_config():
    instance = three_sources()
    one = config_for(instance, "constant", "tuned_dictator", instance.source_weights)
    two = config_for(instance, "constant", "tuned_dictator", {**instance.source_weights, "A": 3})
    decision, _, _ = decide(intake_for(instance), one, {})
    assert decision["config_sha256"] == one.digest() != two.digest()
    assert one.digest() == Config.model_validate(one.model_dump()).digest()


def published(decision: dict) -> dict:
    """What a later re-screen reads back from disk."""
    return json.loads(dumps_decision(decision))


def test_withdraw_and_resubmit_cannot_choose_the_drawn_entry(monkeypatch):
    """A source that saw the published u cannot pick the entry: the first draw stands,
    and any changed re-screen gets a fresh u (HMAC of "<date>#1") and goes to review."""
    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    instance = three_sources()
    config = config_for(instance, "constant", "random_dictator", instance.source_weights)
    first, files, _ = decide(intake_for(instance), config, {})
    assert first["draw_revision"] == 0 and first["draw"]["revision"] == 0
    assert first["draw"]["u"] == uniform_from_date(DEMO_DRAW_KEY, DATE)
    assert first["route"] == "aggregate"

    # identical re-screen: same revision, byte-identical decision.json
    again, again_files, _ = decide(intake_for(instance), config, {}, previous=published(first))
    assert again_files["decision.json"] == files["decision.json"]

    fresh_u = uniform_from_date(DEMO_DRAW_KEY, f"{DATE}#1")
    assert fresh_u != first["draw"]["u"]
    variants = [without(instance, "C"), without(instance, "A")]
    variants += [instance.with_report("C", {j: int(b) for j, b in enumerate(np.binary_repr(k, 4))}) for k in range(16)]
    for batch in variants:
        if batch == instance:
            continue
        revised, revised_files, _ = decide(intake_for(batch), config, {}, previous=published(first))
        assert revised["draw_revision"] == 1
        assert revised["draw"]["u"] == fresh_u  # the same whatever the source changed
        assert revised["route"] == "review"
        assert [r["code"] for r in revised["reasons"] if r["blocking"]] == ["draw_revised"]
        assert revised["earlier_draws"][0]["u"] == first["draw"]["u"]
        assert revised["earlier_draws"][0]["source_id"] == first["draw"]["source_id"]
        # re-screening the changed night again changes nothing; a further change is revision 2
        repeat, repeat_files, _ = decide(intake_for(batch), config, {}, previous=published(revised))
        assert repeat_files["decision.json"] == revised_files["decision.json"]
    back, _, _ = decide(intake_for(instance), config, {}, previous=published(revised))
    assert back["draw_revision"] == 2 and len(back["earlier_draws"]) == 2
    assert back["draw"]["u"] == uniform_from_date(DEMO_DRAW_KEY, f"{DATE}#2")

    # Without revisions the attack works: reusing the published u, the withdrawals
    # select different entries (u = 0.830 under the demo key: C of A, B, C at 1/3 each;
    # B of A, B at 1/2 once C withdraws), so a source would choose by choosing a variant.
    picks = set()
    for batch in (instance, without(instance, "C"), without(instance, "A")):
        lottery = decide(intake_for(batch), config, {})[0]["mechanism"]["lottery"]
        picks.add(lottery[inverse_cdf([e["probability"] for e in lottery], first["draw"]["u"])]["source_id"])
    assert picks == {"B", "C"}


def test_screen_reads_the_published_decision(tmp_path, monkeypatch):
    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    inbox, out = tmp_path / "inbox", tmp_path / "out"
    folder = write_batch(inbox, DATE, seed=3)
    config = load_config(write_config(tmp_path / "c.yaml"))
    first = screen(inbox, DATE, config, out).decision
    assert screen(inbox, DATE, config, out).decision == first
    # east resubmits (replaces its file) after seeing the published draw
    write_labels(folder, "east", [f"lot-{k:05d}" for k in range(120)], np.zeros(120, dtype=np.int8))
    revised = screen(inbox, DATE, config, out).decision
    assert revised["draw_revision"] == 1 and revised["route"] == "review"
    assert revised["earlier_draws"][0]["u"] == first["draw"]["u"]


def test_min_valid_sources_above_one_lets_a_source_veto_by_staying_away(monkeypatch):
    """Why the default is 1. Two sources, one lot: A rejects, X accepts; weights 1, 1;
    random dictator: X's expected risk is 1/2 * 0 + 1/2 * 1 = 1/2 when it takes part.
    With min_valid_sources 2, staying away sends the night to review and keeps the rule
    in force (all-1, X's own best): risk 0. With the default 1 it cannot: away, the
    lottery is A's rule alone, risk 1 >= 1/2."""
    from fractions import Fraction

    from test_strategy_proof import best_deviation

    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    instance = Instance(n_items=1, labels={"A": {0: 0}, "X": {0: 1}}, source_weights={"A": 1, "X": 1}, item_weights=(1,))
    strict = config_for(instance, "constant", "random_dictator", instance.source_weights, min_valid_sources=2)
    ((truthful, best, how),) = best_deviation(instance, strict, "X", [(1,)])
    assert (truthful, best, how) == (Fraction(1, 2), Fraction(0), "away")
    default = config_for(instance, "constant", "random_dictator", instance.source_weights)
    ((truthful, best, _),) = best_deviation(instance, default, "X", [(1,)])
    assert best == truthful == Fraction(1, 2)


def test_removing_a_stray_file_that_quarantined_a_source_revises_the_draw(tmp_path, monkeypatch):
    """A misnamed file is not an input, but it quarantined its source: deleting it lets
    the source join the lottery, so the night changed after a published draw."""
    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    inbox, out = tmp_path / "inbox", tmp_path / "out"
    folder = write_batch(inbox, DATE, seed=3)
    stray = folder / "source_id=east" / "labels.csv"
    stray.write_text("item_id,label\nlot-00000,1\n")
    config = load_config(write_config(tmp_path / "c.yaml"))
    first = screen(inbox, DATE, config, out).decision
    assert [q["source_id"] for q in first["quarantined"]] == ["east"]
    assert "misnamed_label_file" in [e["code"] for e in first["errors"]]
    assert "east" not in [e["source_id"] for e in first["mechanism"]["lottery"]]
    published_bytes = (out / f"batch_date={DATE}" / "decision.json").read_bytes()
    again = screen(inbox, DATE, config, out).decision  # identical re-screen: nothing changes
    assert again["draw_revision"] == 0
    assert (out / f"batch_date={DATE}" / "decision.json").read_bytes() == published_bytes

    stray.unlink()
    revised = screen(inbox, DATE, config, out).decision
    assert "east" in [e["source_id"] for e in revised["mechanism"]["lottery"]]
    assert revised["draw_revision"] == 1 and revised["route"] == "review"
    assert "draw_revised" in [r["code"] for r in revised["reasons"] if r["blocking"]]
    assert revised["draw"]["u"] == uniform_from_date(DEMO_DRAW_KEY, f"{DATE}#1") != first["draw"]["u"]
    assert revised["earlier_draws"][0]["u"] == first["draw"]["u"]
