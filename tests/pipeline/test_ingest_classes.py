"""Ingest with a configured class alphabet: real Parquet inboxes, decoded through pipeline/classes.py.

Known answers are written by hand from the files each test writes (no value is copied from the code).
"""

from __future__ import annotations

import json

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import yaml

from inboxes import cli
from truthsieve.exceptions import ConfigError
from truthsieve.pipeline import ingest
from truthsieve.pipeline.classes import ClassAlphabet
from truthsieve.pipeline.config import load_config

GRADES = ClassAlphabet(("reject", "feed", "milling", "premium"))
DATE = "2026-12-01"
IDS = ["lot-1", "lot-2", "lot-3", "lot-4"]


def _night(tmp_path, labels: dict[str, pa.Array], rules: dict[str, pa.Array] | None = None):
    folder = tmp_path / "inbox" / f"batch_date={DATE}"
    folder.mkdir(parents=True)
    pq.write_table(pa.table({"item_id": IDS, "test_weight_kg_hl": [72.0, 76.0, 78.0, 81.0], **(rules or {})}), folder / "items.parquet")
    for source, column in labels.items():
        (folder / f"source_id={source}").mkdir()
        pq.write_table(pa.table({"item_id": IDS, "label": column}), folder / f"source_id={source}" / "grades.parquet")
    return tmp_path / "inbox", folder


def _validate(inbox, folder, source, classes=GRADES):
    items = ingest.validate_items(inbox, DATE, ["test_weight_kg_hl"], classes=classes)
    return ingest.validate_source(inbox, folder / f"source_id={source}", {"lab": 1, "mill": 1}, items.table["item_id"], classes=classes)


def test_names_and_indices_decode_to_the_same_class_indices(tmp_path):
    inbox, folder = _night(tmp_path, {
        "lab": pa.array(["feed", "milling", "milling", "premium"]).dictionary_encode(),
        "mill": pa.array([1, 2, 2, 3], pa.int64()),
    })
    for source in ("lab", "mill"):
        check = _validate(inbox, folder, source)
        assert check.errors == [] and check.table["label"].tolist() == [1, 2, 2, 3]  # feed=1, milling=2, premium=3


@pytest.mark.parametrize(
    ("column", "rows", "rule"),
    [
        (pa.array(["feed", "gold", "milling", "Premium"]), [2, 4], "unknown_class_name"),  # names match exactly
        (pa.array([0, 4, 3, -1], pa.int8()), [2, 4], "class_index_out_of_range"),  # K = 4: indices 0..3
        (pa.array([True, False, True, True]), [None], "wrong_type"),  # bool only when K = 2
    ],
)
def test_bad_labels_are_quarantined_naming_file_row_and_column(tmp_path, column, rows, rule):
    inbox, folder = _night(tmp_path, {"mill": column})
    check = _validate(inbox, folder, "mill")
    assert check.table is None
    assert [(e.file, e.row, e.column, e.rule) for e in check.errors] == [
        (f"batch_date={DATE}/source_id=mill/grades.parquet", row, "label", rule) for row in rows
    ]


def test_without_classes_a_grade_index_is_todays_binary_error(tmp_path):
    inbox, folder = _night(tmp_path, {"mill": pa.array([1, 2, 0, 3], pa.int64())})
    check = _validate(inbox, folder, "mill", classes=ClassAlphabet())
    assert [(e.row, e.rule, e.message) for e in check.errors] == [
        (2, "label_out_of_range", "label must be 0 or 1"), (4, "label_out_of_range", "label must be 0 or 1"),
    ]


def test_listed_rule_columns_hold_class_indices_when_classes_are_named(tmp_path):
    rules = {"rule__heavy": pa.array([1, 2, 2, 3], pa.int16()), "rule__odd": pa.array([0, 5, None, 1], pa.int16())}
    inbox, _ = _night(tmp_path, {}, rules)
    check = ingest.validate_items(inbox, DATE, listed=True, kind="listed", classes=GRADES)
    # rule__odd: row 3 is null, row 2 holds 5 (K = 4); rule__heavy is fine
    assert [(e.row, e.column, e.rule) for e in check.errors] == [
        (3, "rule__odd", "null_rule_value"), (2, "rule__odd", "rule_class_out_of_range"),
    ]
    # a rule value error does not hide the table's other row errors (here a repeated item_id on row 4)
    folder = tmp_path / "inbox" / f"batch_date={DATE}"
    pq.write_table(pa.table({"item_id": IDS[:3] + ["lot-1"], "test_weight_kg_hl": [72.0, 76.0, 78.0, 81.0], **rules}), folder / "items.parquet")
    check = ingest.validate_items(inbox, DATE, listed=True, kind="listed", classes=GRADES)
    assert [(e.row, e.column, e.rule) for e in check.errors] == [
        (4, "item_id", "duplicate_item_id"), (3, "rule__odd", "null_rule_value"), (2, "rule__odd", "rule_class_out_of_range"),
    ]
    good = tmp_path / "good"
    inbox, _ = _night(good, {}, {"rule__heavy": rules["rule__heavy"]})
    check = ingest.validate_items(inbox, DATE, listed=True, kind="listed", classes=GRADES)
    assert check.errors == [] and check.table["rule__heavy"].tolist() == [1, 2, 2, 3]
    # without classes an integer rule column is still the binary type error
    check = ingest.validate_items(inbox, DATE, listed=True, kind="listed")
    assert [(e.column, e.rule, e.message) for e in check.errors] == [("rule__heavy", "wrong_type", "rule column must be bool, not int16")]


CONFIG = {
    "rule_class": {"kind": "constant"},
    "mechanism": "two_rule_vote",
    "sources": [{"source_id": "lab", "weight": 1.0}],
}


@pytest.mark.parametrize("mechanism", ["two_rule_vote", "two_rule_lottery"])
def test_two_rule_mechanisms_are_refused_for_more_than_two_classes(tmp_path, mechanism):
    path = tmp_path / "c.yaml"
    path.write_text(yaml.safe_dump({**CONFIG, "mechanism": mechanism, "classes": ["reject", "accept"]}))
    assert load_config(path).class_alphabet.count == 2  # two named classes: still two rules
    path.write_text(yaml.safe_dump({**CONFIG, "mechanism": mechanism, "classes": ["reject", "feed", "milling"]}))
    with pytest.raises(ConfigError, match=f"{mechanism}.*exactly two rules.*classes has 3"):
        load_config(path)
    result = cli("screen", "--inbox", str(tmp_path), "--date", DATE, "--config", str(path), "--out", str(tmp_path / "out"))
    assert result.returncode == 2 and len(result.stderr.strip().splitlines()) == 1 and "Traceback" not in result.stderr
    assert not (tmp_path / "out").exists()


def test_a_k4_night_through_the_command_line_quarantines_a_misspelt_class(tmp_path):
    inbox, _ = _night(tmp_path, {
        "lab": pa.array(["feed", "milling", "milling", "premium"]),
        "mill": pa.array(["feed", "milling", "premiun", "premium"]),
    })
    config = tmp_path / "c.yaml"
    config.write_text(yaml.safe_dump({
        "rule_class": {"kind": "threshold", "features": ["test_weight_kg_hl"]}, "mechanism": "tuned_dictator",
        "classes": list(GRADES.names), "sources": [{"source_id": "lab", "weight": 1.0}, {"source_id": "mill", "weight": 1.0}],
    }))
    result = cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(config), "--out", str(tmp_path / "out"))
    assert result.returncode == 0, result.stderr
    decision = json.loads((tmp_path / "out" / f"batch_date={DATE}" / "decision.json").read_text())
    assert [(e["file"], e["row"], e["column"], e["rule"]) for e in decision["errors"]] == [
        (f"batch_date={DATE}/source_id=mill/grades.parquet", 3, "label", "unknown_class_name")
    ]
    # lab alone: feed below 76 > cut, milling on 76 and 78, premium at 81 -> its best threshold has 1 error of 4
    # (cut 74 = midpoint of 72 and 76: above milling, below feed; lot-4 premium missed), risk 1/4
    assert decision["consensus"]["risk"] == pytest.approx(0.25)
