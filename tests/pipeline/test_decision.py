"""The typed decision (pipeline/decision.py) and its one serialiser.

Known answers: the golden decision.json files (written before the typed decision existed)
and the contract's key list (CONTRACT.md, "decision.json (keys that must exist)").
"""

from __future__ import annotations

import dataclasses
import json
import re
import shutil
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from truthsieve.pipeline import decision as decision_module
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.decision import Agreement, Decision, InputRecord, Quarantined, decision_json
from truthsieve.pipeline.outputs import dumps_decision
from truthsieve.pipeline.records import ErrorRecord
from truthsieve.pipeline.routing import Reason
from truthsieve.pipeline.screen import decide_night
from night_support import ingest_batch

GOLDEN = Path(__file__).resolve().parents[1] / "golden" / "binary"
ADDED_BELOW = re.compile(rb'^[ ]*"below": [^\n]*,\n', re.MULTILINE)
CONTRACT_KEYS = {
    "batch_date", "route", "reasons", "rule_class", "shared_inputs", "consensus", "mechanism", "draw",
    "sources", "agreement", "inputs", "tool_version", "absent", "config_sha256",
}


@pytest.fixture(scope="module", params=["2026-11-03", "2026-11-15"])
def golden(request, tmp_path_factory):
    night = request.param
    inbox = tmp_path_factory.mktemp("golden") / "inbox"
    shutil.copytree(GOLDEN / "inbox" / f"batch_date={night}", inbox / f"batch_date={night}")
    config = load_config(GOLDEN / "config.yaml")
    expected = (GOLDEN / f"decision-{night}.json").read_bytes()
    return decide_night(ingest_batch(inbox, night, config), config, {}), expected


def test_the_serialised_typed_decision_is_the_golden_file(golden):
    decided, expected = golden
    assert isinstance(decided.decision, Decision)
    assert ADDED_BELOW.sub(b"", dumps_decision(decision_json(decided.decision))) == expected
    assert ADDED_BELOW.sub(b"", decided.files["decision.json"]) == expected


def test_the_draw_is_the_inverse_cdf_entry_of_the_published_u(golden):
    decided, expected = golden
    typed, published = decided.decision, json.loads(expected)
    assert typed.draw.u == published["draw"]["u"]
    # Inverse CDF by hand: the first entry whose cumulative probability exceeds u.
    total, index = 0.0, None
    for k, choice in enumerate(typed.mechanism.lottery):
        total += choice.probability
        if typed.draw.u < total and choice.probability > 0:
            index = k
            break
    assert typed.draw.index == index
    assert typed.draw.rule == typed.mechanism.lottery[index].rule and typed.draw.source_id == typed.mechanism.lottery[index].source_id


def test_the_typed_decision_is_frozen_and_holds_the_contract_keys(golden):
    decided, _ = golden
    with pytest.raises(dataclasses.FrozenInstanceError):
        decided.decision.route = "aggregate"
    assert CONTRACT_KEYS <= set(decision_json(decided.decision))
    assert decided.decision.flagged == [s.source_id for s in decided.decision.sources if s.flags]


def test_sources_parquet_columns_keep_their_order(golden):
    decided, _ = golden
    table = pq.read_table(pa.BufferReader(decided.files["sources.parquet"]))
    # The order sources.parquet had before the typed decision (the dict's key order).
    assert table.column_names == [
        "source_id", "weight", "items", "positive_rate", "disagreement", "own_best_risk", "gain_lower", "gain_upper",
        "gain_exact", "pull", "lie_weight_lower", "lie_weight_upper", "lie_damage", "kappa", "sensitivity",
        "specificity", "balanced_accuracy", "drift_positive_rate_p", "drift_disagreement_p", "history_batches",
        "flags", "positives", "disagreements", "disagreement_low", "disagreement_high", "own_best_rule",
        "gain_target_rule", "others_rule", "batch_date",
    ]


def test_a_night_without_a_fit_serialises_nulls_and_lists():
    empty = Decision(
        batch_date="2026-11-03", route="review",
        reasons=(Reason("no_items", "m", True), Reason("quarantined", "q", True, "south")),
        rule_class={"kind": "constant", "features": []}, shared_inputs=None, consensus=None, mechanism=None, draw=None,
        sources=(), agreement=Agreement(), items_needed=None, n_items=None,
        inputs=(InputRecord("batch_date=2026-11-03/items.parquet", "ab", None, False, None),),
        quarantined=(Quarantined(None, ("batch_date=2026-11-03/items.parquet",)),), errors=(), notes=(), absent=(),
        config_sha256="c", draw_revision=0, earlier_draws=(), tool_version="t",
    )
    data = decision_json(empty)
    assert data["reasons"] == [
        {"code": "no_items", "message": "m", "blocking": True},  # no source_id key when there is none
        {"code": "quarantined", "message": "q", "blocking": True, "source_id": "south"},
    ]
    assert data["agreement"] == {"krippendorff_alpha": None, "fleiss_kappa": None}
    assert data["quarantined"] == [{"source_id": None, "files": ["batch_date=2026-11-03/items.parquet"]}]
    assert data["consensus"] is None and data["draw"] is None and data["sources"] == []
    assert json.loads(dumps_decision(data)) == data


def test_nan_numbers_become_null():
    assert decision_module._number(float("nan")) is None and decision_module._number(None) is None
    assert decision_module._number(0.25) == 0.25


@pytest.fixture(scope="module")
def published(tmp_path_factory):
    """Every decision.json the demo and the K-class demo publish (current nights and earlier
    revisions) and the golden files, as bytes."""
    import os

    from truthsieve.pipeline.cli import main

    os.environ.pop("TRUTHSIEVE_DRAW_KEY", None)
    root = tmp_path_factory.mktemp("published")
    for scenario in ("grain", "grades"):
        assert main(["demo", "--scenario", scenario, "--out", str(root / scenario)]) == 0
    paths = sorted(root.glob("*/batch_date=*/decision.json")) + sorted(root.glob("*/.revisions/*/decision.json"))
    return {str(p): p.read_bytes() for p in [*paths, *sorted(GOLDEN.glob("decision-*.json"))]}


def test_a_published_decision_reads_back_to_the_same_bytes(published):
    from truthsieve.pipeline.decision import decision_from_json

    kinds = set()
    for path, raw in published.items():
        data = json.loads(raw)
        typed = decision_from_json(data)
        assert isinstance(typed, Decision), path
        assert dumps_decision(decision_json(typed)) == raw, path
        assert decision_json(typed) == data, path
        kinds |= {k for k in ("classes", "errors", "absent", "earlier_draws", "quarantined") if data.get(k)}
        if typed.errors:
            assert [x.as_dict() for x in typed.errors] == data["errors"]  # the typed errors, not dicts
    # the demo and the golden files between them hold every optional part (else the round trip proves less)
    assert kinds == {"classes", "errors", "absent", "earlier_draws", "quarantined"}
    assert len(published) >= 3 + 14 + 7  # golden, binary demo nights, grades nights


def test_a_night_without_a_fit_and_with_notes_reads_back():
    from truthsieve.pipeline.decision import decision_from_json
    from truthsieve.pipeline.layout import Note

    empty = Decision(
        batch_date="2026-11-03", route="review", reasons=(Reason("no_items", "m", True),),
        rule_class={"kind": "constant", "features": []}, shared_inputs=None, consensus=None, mechanism=None, draw=None,
        sources=(), agreement=Agreement(), items_needed=None, n_items=None,
        inputs=(InputRecord("batch_date=2026-11-03/items.parquet", "ab", None, False, None),),
        quarantined=(Quarantined(None, ("batch_date=2026-11-03/items.parquet",)),), errors=(),
        notes=(Note("stray_file", "batch_date=2026-11-03/x.txt", "not a source folder"),), absent=(),
        config_sha256="c", draw_revision=0, earlier_draws=(), tool_version="t", classes=("low", "mid", "high"),
    )
    assert decision_from_json(json.loads(dumps_decision(decision_json(empty)))) == empty  # frozen dataclasses compare by value
    from decision_support import fitted, source_entry

    drawn = fitted(sources=[source_entry(flags=["pulls_fit"])], errors=[ErrorRecord("f", None, None, "empty_file", "m")])
    assert decision_from_json(json.loads(dumps_decision(decision_json(drawn)))) == drawn  # tuples stay tuples, errors typed


def test_a_decision_lacking_a_key_is_refused_but_for_keys_older_files_lack():
    from truthsieve.pipeline.decision import decision_from_json

    data = json.loads((GOLDEN / "decision-2026-11-03.json").read_bytes())
    for key in ("route", "sources", "inputs", "agreement", "tool_version"):
        with pytest.raises(KeyError, match=key):
            decision_from_json({k: v for k, v in data.items() if k != key})
    # written since a later version (the report and index read them with defaults before the typed decision)
    older = decision_from_json({k: v for k, v in data.items() if k not in ("absent", "notes", "earlier_draws", "draw_revision", "config_sha256")})
    assert (older.absent, older.notes, older.earlier_draws, older.draw_revision, older.config_sha256) == ((), (), (), 0, None)
    assert older.sources == decision_from_json(data).sources


def test_sources_parquet_holds_the_golden_decisions_numbers_and_rules(golden):
    decided, expected = golden
    rows = pq.read_table(pa.BufferReader(decided.files["sources.parquet"])).to_pylist()
    published = json.loads(expected)["sources"]  # the golden file (before K classes: rules without "below")
    assert [r["source_id"] for r in rows] == [s["source_id"] for s in published]
    for row, source in zip(rows, published):
        for name in ("weight", "items", "disagreement", "pull", "gain_lower", "kappa", "balanced_accuracy", "history_batches"):
            assert row[name] == source[name], name
        assert row["flags"] == source["flags"] and row["batch_date"] == json.loads(expected)["batch_date"]
        assert (row["disagreement_low"], row["disagreement_high"]) == tuple(source["disagreement_interval"])
        for name in ("own_best_rule", "others_rule", "gain_target_rule"):
            rule = json.loads(row[name])
            rule.pop("below", None)  # added with K classes; the golden files predate it
            assert rule == source[name], name
