"""Names of our own: error records carry truthsieve's code beside the former one (an alias
kept for one release), and the draw key's fingerprint says what it is."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from truthsieve.core.draw import key_fingerprint
from truthsieve.pipeline import demo
from truthsieve.pipeline.records import CODE_OF_FORMER, ErrorRecord, FileCheck

FORMER = ["missing_column", "extra_column", "wrong_type", "duplicate_label", "empty_file", "unreadable_parquet"]


def test_every_former_code_named_in_the_issue_is_renamed_and_no_new_code_reuses_an_old_word():
    assert set(FORMER) <= set(CODE_OF_FORMER)
    assert len(set(CODE_OF_FORMER.values())) == len(CODE_OF_FORMER)  # one new name per former code
    assert not set(CODE_OF_FORMER.values()) & set(CODE_OF_FORMER)
    for new in CODE_OF_FORMER.values():
        assert not any(old == new or old in new for old in FORMER), new


def test_a_record_carries_code_and_the_former_code_and_survives_a_round_trip():
    record = ErrorRecord("batch_date=2026-11-02/source_id=a/x.parquet", 3, "label", "label_out_of_range", "label must be 0 or 1")
    data = record.as_dict()
    assert data["code"] == "grade_not_0_or_1" and data["rule"] == "label_out_of_range"
    check = FileCheck.from_summary({"source_id": "a", "inputs": [], "errors": [data], "notes": []}, None)
    assert check.errors == [record]  # the summary's extra key is not a field


def test_quarantine_errors_json_of_the_demo_uses_the_new_codes(tmp_path, monkeypatch):
    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    from truthsieve.pipeline.screen import screen

    inbox, out = tmp_path / "inbox", tmp_path / "out"
    dates = demo.generate_inbox(inbox)
    date = dates[demo.BROKEN_NIGHT - 1]
    screen(inbox, date, demo.demo_config(), out)
    errors = json.loads((out / f"batch_date={date}" / "quarantine" / "errors.json").read_text())["errors"]
    # the broken file (demo.py): broken[17] = 2 is a grade outside {0, 1} on 1-based row 18
    assert ("grade_not_0_or_1", "label_out_of_range", 18, "label") in {(e["code"], e["rule"], e["row"], e["column"]) for e in errors}
    assert all(e["code"] == CODE_OF_FORMER.get(e["rule"], e["rule"]) for e in errors)


def test_key_fingerprint_names_a_draw_key_not_a_digest():
    assert re.fullmatch(r"draw-key:[0-9a-f]{16}", key_fingerprint("some key"))


def test_readme_lists_every_new_code_with_its_former_code():
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text()
    for former, new in CODE_OF_FORMER.items():
        assert f"`{new}`" in readme and f"`{former}`" in readme, new


# what a source can get wrong in its own delivery (the items table's codes go to the platform)
SOURCE_SIDE = ["table_lacks_column", "file_holds_unlisted_column", "column_holds_other_type", "lot_graded_twice", "file_holds_no_rows",
               "file_is_not_parquet", "grade_blank", "grade_not_0_or_1", "lot_not_in_items_table", "folder_holds_no_labels"]


@pytest.mark.parametrize("code", SOURCE_SIDE)
def test_every_code_a_source_can_trip_has_a_fix(code):
    from truthsieve.pipeline.evidence import FIXES

    assert code in CODE_OF_FORMER.values() and code in FIXES
