"""Each input rule yields an error record naming file, row and column, and a quarantine copy."""

from __future__ import annotations

import json

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from inboxes import SOURCES, checksums, cli, write_batch, write_config

DATE = "2026-11-03"


def _table_with(**columns):
    return pa.table(columns)


def _bad_label_file(kind: str, ids: list[str]):
    """(file content writer, expected rule, expected row, expected column)."""
    n = len(ids)
    ok = np.zeros(n, dtype=bool)
    if kind == "missing_column":
        return _table_with(item_id=ids), "missing_column", None, "label"
    if kind == "extra_column":
        return _table_with(item_id=ids, label=ok, grader=["x"] * n), "extra_column", None, "grader"
    if kind == "wrong_type":
        return _table_with(item_id=ids, label=["yes"] * n), "wrong_type", None, "label"
    if kind == "label_out_of_range":
        labels = np.zeros(n, dtype=np.int64)
        labels[4] = 7
        return _table_with(item_id=ids, label=labels), "label_out_of_range", 5, "label"
    if kind == "null_label":
        return _table_with(item_id=ids, label=pa.array([None] + [True] * (n - 1), pa.bool_())), "null_label", 1, "label"
    if kind == "null_item_id":
        return _table_with(item_id=pa.array(ids[:2] + [None] + ids[3:], pa.string()), label=ok), "null_item_id", 3, "item_id"
    if kind == "duplicate_label":
        return _table_with(item_id=ids + [ids[0]], label=np.append(ok, True)), "duplicate_label", n + 1, "item_id"
    if kind == "unknown_item":
        return _table_with(item_id=ids[:-1] + ["lot-nowhere"], label=ok), "unknown_item", n, "item_id"
    if kind == "empty_file":
        return _table_with(item_id=pa.array([], pa.string()), label=pa.array([], pa.bool_())), "empty_file", None, None
    raise AssertionError(kind)


LABEL_RULES = ["missing_column", "extra_column", "wrong_type", "label_out_of_range", "null_label", "null_item_id", "duplicate_label", "unknown_item", "empty_file"]


@pytest.mark.parametrize("rule", LABEL_RULES + ["unreadable_parquet", "bad_source_id", "unknown_source"])
def test_bad_source_file_is_quarantined_with_a_precise_error(tmp_path, rule):
    inbox, out = tmp_path / "inbox", tmp_path / "out"
    folder = write_batch(inbox, DATE)
    ids = [f"lot-{k:05d}" for k in range(120)]
    if rule in LABEL_RULES:
        table, expected_rule, row, column = _bad_label_file(rule, ids)
        path = folder / "source_id=south" / "labels.parquet"
        pq.write_table(table, path)
        source = "south"
    elif rule == "unreadable_parquet":
        path = folder / "source_id=south" / "labels.parquet"
        path.write_bytes(path.read_bytes()[:200])  # truncated
        expected_rule, row, column, source = rule, None, None, "south"
    else:
        name = "bad name!" if rule == "bad_source_id" else "stranger"
        (folder / f"source_id={name}").mkdir()
        path = folder / f"source_id={name}" / "labels.parquet"
        pq.write_table(_table_with(item_id=ids, label=np.ones(120, dtype=bool)), path)
        expected_rule, row, column, source = rule, None, "source_id", name
    before = checksums(inbox)

    result = cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(write_config(tmp_path / "c.yaml")), "--out", str(out))
    assert result.returncode == 0, result.stderr
    assert checksums(inbox) == before  # inputs never modified, moved or deleted

    batch = out / f"batch_date={DATE}"
    decision = json.loads((batch / "decision.json").read_text())
    records = [e for e in decision["errors"] if e["rule"] == expected_rule]
    assert records, decision["errors"]
    assert records[0]["row"] == row and records[0]["column"] == column
    assert path.relative_to(inbox).as_posix().startswith(records[0]["file"])
    # strategy_proof mode (default): a quarantined source is absent, noted, not blocking
    assert decision["route"] == "aggregate"
    assert any(r["code"] == "source_quarantined" and r["source_id"] == source and not r["blocking"] for r in decision["reasons"])
    copy = batch / "quarantine" / path.relative_to(folder)
    assert copy.read_bytes() == path.read_bytes()
    assert json.loads((batch / "quarantine" / "errors.json").read_text())["errors"] == decision["errors"]
    assert source not in [s["source_id"] for s in decision["sources"]]
    assert len(decision["sources"]) == len(SOURCES) - (source in SOURCES)


@pytest.mark.parametrize(
    ("rule", "column", "mutate"),
    [
        ("duplicate_item_id", "item_id", lambda t: t.set_column(0, "item_id", pa.array(["lot-00001"] + t.column("item_id").to_pylist()[1:]))),
        ("non_finite_feature", "moisture_pct", lambda t: t.set_column(1, "moisture_pct", pa.array([float("nan")] + t.column("moisture_pct").to_pylist()[1:]))),
        ("negative_item_weight", "item_weight", lambda t: t.append_column("item_weight", pa.array([1.0] * (t.num_rows - 1) + [-1.0]))),
        ("wrong_type", "falling_number_s", lambda t: t.set_column(2, "falling_number_s", pa.array(["x"] * t.num_rows))),
    ],
)
def test_bad_items_table_stops_the_batch_but_still_writes_a_review_decision(tmp_path, rule, column, mutate):
    inbox, out = tmp_path / "inbox", tmp_path / "out"
    folder = write_batch(inbox, DATE)
    items = folder / "items.parquet"
    pq.write_table(mutate(pq.read_table(items)), items)
    result = cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(write_config(tmp_path / "c.yaml")), "--out", str(out))
    assert result.returncode == 0, result.stderr
    decision = json.loads((out / f"batch_date={DATE}" / "decision.json").read_text())
    assert decision["route"] == "review" and decision["consensus"] is None
    assert any(r["code"] == "items_invalid" and r["blocking"] for r in decision["reasons"])
    assert any(e["rule"] == rule and e["column"] == column for e in decision["errors"])
    assert (out / f"batch_date={DATE}" / "quarantine" / "items.parquet").read_bytes() == items.read_bytes()


def test_missing_batch_and_bad_config_exit_non_zero_without_output(tmp_path):
    config = write_config(tmp_path / "c.yaml")
    missing = cli("screen", "--inbox", str(tmp_path / "inbox"), "--date", DATE, "--config", str(config), "--out", str(tmp_path / "out"))
    assert missing.returncode == 2 and "no such batch folder" in missing.stderr
    bad = tmp_path / "bad.yaml"
    bad.write_text("rule_class: {kind: threshold}\nmechanism: coin_toss\nsources: []\n")
    write_batch(tmp_path / "inbox", DATE)
    result = cli("screen", "--inbox", str(tmp_path / "inbox"), "--date", DATE, "--config", str(bad), "--out", str(tmp_path / "out"))
    assert result.returncode == 2
    assert "mechanism" in result.stderr and "rule_class" in result.stderr and "sources" in result.stderr
    assert not (tmp_path / "out" / f"batch_date={DATE}").exists()
