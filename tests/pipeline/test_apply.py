"""Applying the rule in force to a new items table (real Parquet files)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from inboxes import cli
from truthsieve.exceptions import InputError
from truthsieve.pipeline.apply import apply_rule
from truthsieve.pipeline.outputs import batch_output
from truthsieve.pipeline.verdicts import record_publication


def put_in_force(out: Path, date: str, rule: dict, classes: list[str] | None = None) -> None:
    """Publish a synthetic aggregated night whose drawn rule is ``rule``; its decision.json
    records ``classes`` as a K-class night does (none: a binary night, as decision.json omits it)."""
    decision = {"batch_date": date, "route": "aggregate", "draw": {"rule": rule}}
    if classes is not None:
        decision["classes"] = list(classes)
    data = json.dumps(decision, sort_keys=True).encode()
    batch_output(out, date).mkdir(parents=True, exist_ok=True)
    (batch_output(out, date) / "decision.json").write_bytes(data)
    record_publication(out, date, data)


def items(path: Path, **columns) -> Path:
    n = len(next(iter(columns.values())))
    pq.write_table(pa.table({"item_id": [f"i{k}" for k in range(n)], **columns}), path)
    return path


def labels(path: Path) -> list[int]:
    return pq.read_table(path).column("label").to_pylist()


def test_threshold_rule_labels_by_its_cut(tmp_path):
    out = tmp_path / "out"
    put_in_force(out, "2026-11-02", {"kind": "threshold", "feature": "moisture_pct", "cut": 14.25, "above": 0})
    source = items(tmp_path / "lots.parquet", moisture_pct=[13.0, 14.25, 14.3, 19.0], protein_pct=[1.0, 2.0, 3.0, 4.0])
    before = source.read_bytes()
    result = apply_rule(out, source, tmp_path / "labelled.parquet")
    # x > 14.25 gets above = 0, the rest 1: 13.0 -> 1, 14.25 -> 1 (not above), 14.3 -> 0, 19.0 -> 0
    assert labels(tmp_path / "labelled.parquet") == [1, 1, 0, 0]
    assert result["rows"] == 4 and result["since"] == "2026-11-02"
    assert source.read_bytes() == before
    assert pq.read_table(tmp_path / "labelled.parquet").column_names == ["item_id", "label", "rule"]


def test_class_threshold_uses_its_below_label(tmp_path):
    out = tmp_path / "out"
    put_in_force(out, "2026-11-02", {"kind": "threshold", "feature": "test_weight_kg_hl", "cut": 75.0, "above": 3, "below": 1})
    source = items(tmp_path / "lots.parquet", test_weight_kg_hl=[70, 75, 76, 80])  # integer feature column
    apply_rule(out, source, tmp_path / "labelled.parquet")
    assert labels(tmp_path / "labelled.parquet") == [1, 1, 3, 3]


def test_listed_rule_copies_its_column_and_constant_rule_fills(tmp_path):
    out = tmp_path / "out"
    put_in_force(out, "2026-11-02", {"kind": "listed", "name": "dry_enough"})
    source = items(tmp_path / "lots.parquet", rule__dry_enough=[True, False, True], rule__other=[False, False, False])
    apply_rule(out, source, tmp_path / "listed.parquet")
    assert labels(tmp_path / "listed.parquet") == [1, 0, 1]
    put_in_force(out, "2026-11-03", {"kind": "constant", "label": 1})
    apply_rule(out, source, tmp_path / "constant.parquet")
    assert labels(tmp_path / "constant.parquet") == [1, 1, 1]
    apply_rule(out, source, tmp_path / "as-of.parquet", as_of="2026-11-02")
    assert labels(tmp_path / "as-of.parquet") == [1, 0, 1]


def test_missing_rule_column_is_refused_by_the_cli_in_one_line(tmp_path):
    out = tmp_path / "out"
    put_in_force(out, "2026-11-02", {"kind": "listed", "name": "dry_enough"})
    source = items(tmp_path / "lots.parquet", moisture_pct=[13.0, 15.0])
    result = cli("apply", "--out", str(out), "--items", str(source), "--write", str(tmp_path / "x.parquet"))
    assert result.returncode == 2 and len(result.stderr.strip().splitlines()) == 1
    assert "rule__dry_enough" in result.stderr and "lots.parquet" in result.stderr
    assert not (tmp_path / "x.parquet").exists()


@pytest.mark.parametrize(
    "columns, words",
    [
        ({"moisture_pct": [13.0, float("nan")]}, ["row 2", "moisture_pct", "not finite"]),
        ({"moisture_pct": pa.array([13.0, None])}, ["row 2", "null"]),
        ({"moisture_pct": ["wet", "dry"]}, ["moisture_pct", "numeric"]),
        ({"falling_number_s": [300.0, 200.0]}, ["'moisture_pct' is missing"]),
    ],
)
def test_bad_items_are_refused_naming_file_row_and_column(tmp_path, columns, words):
    out = tmp_path / "out"
    put_in_force(out, "2026-11-02", {"kind": "threshold", "feature": "moisture_pct", "cut": 14.0, "above": 0})
    source = items(tmp_path / "lots.parquet", **columns)
    with pytest.raises(InputError) as error:
        apply_rule(out, source, tmp_path / "x.parquet")
    for word in ["lots.parquet", *words]:
        assert word in str(error.value)


def test_no_rule_in_force_and_writing_over_the_input_are_refused(tmp_path):
    out = tmp_path / "out"
    source = items(tmp_path / "lots.parquet", moisture_pct=np.array([13.0]))
    with pytest.raises(InputError, match="no rule in force"):
        apply_rule(out, source, tmp_path / "x.parquet")
    put_in_force(out, "2026-11-05", {"kind": "constant", "label": 0})
    with pytest.raises(InputError, match="no rule in force on 2026-11-04"):
        apply_rule(out, source, tmp_path / "x.parquet", as_of="2026-11-04")
    with pytest.raises(InputError, match="never modified"):
        apply_rule(out, source, source)
