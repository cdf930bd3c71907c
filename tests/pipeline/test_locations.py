"""``pipeline/locations.py`` on its own: ``--out`` against the inbox, and the configured columns
checked against the items tables' footers, with the exact one-line messages (real files).

The overlap cases through links and the unwritable outputs are in ``test_ingest_hardening.py``;
here each refusal's words, and which items tables the column checks may read.
"""

from __future__ import annotations

import os
from types import SimpleNamespace

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from inboxes import write_config
from truthsieve.exceptions import ConfigError
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.locations import check_configured_columns, check_features_present, check_out_location, check_rule_columns_present

NIGHTS = ["2026-11-01", "2026-11-02", "2026-11-03"]


def items(inbox, date: str, **columns) -> None:
    folder = inbox / f"batch_date={date}"
    folder.mkdir(parents=True, exist_ok=True)
    pq.write_table(pa.table({"item_id": ["lot-1", "lot-2"], **{name: [1.0, 2.0] for name in columns}}), folder / "items.parquet")


# --- --out against the inbox ---------------------------------------------------------------


def test_out_equal_to_the_inbox_is_refused_in_words(tmp_path):
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    with pytest.raises(ConfigError) as refused:
        check_out_location(inbox, inbox)
    assert str(refused.value) == f"--out {inbox} is the inbox {inbox}; outputs must go elsewhere"


def test_out_inside_the_inbox_is_refused_and_not_created(tmp_path):
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    out = inbox / "reports"
    with pytest.raises(ConfigError) as refused:
        check_out_location(inbox, out)
    assert str(refused.value) == f"--out {out} lies inside the inbox {inbox}; outputs must go elsewhere"
    assert list(inbox.iterdir()) == []  # refused before anything was made


def test_out_inside_the_inbox_through_a_relative_spelling_is_refused(tmp_path):
    inbox = tmp_path / "inbox"
    (inbox / "batch_date=2026-11-01").mkdir(parents=True)
    out = tmp_path / "elsewhere" / ".." / "inbox" / "batch_date=2026-11-01" / "out"
    with pytest.raises(ConfigError, match="lies inside the inbox"):
        check_out_location(inbox, out)
    assert not (inbox / "batch_date=2026-11-01" / "out").exists() and not (tmp_path / "elsewhere").exists()


def test_out_containing_the_inbox_is_refused_in_words(tmp_path):
    inbox = tmp_path / "data" / "inbox"
    inbox.mkdir(parents=True)
    with pytest.raises(ConfigError) as refused:
        check_out_location(inbox, tmp_path / "data")
    assert str(refused.value) == f"--out {tmp_path / 'data'} contains the inbox {inbox}; outputs must go elsewhere"


def test_an_out_link_into_the_inbox_is_refused(tmp_path):
    inbox = tmp_path / "inbox"
    (inbox / "deep").mkdir(parents=True)
    os.symlink(inbox / "deep", tmp_path / "out")  # looks beside the inbox, resolves inside it
    with pytest.raises(ConfigError, match="lies inside the inbox"):
        check_out_location(inbox, tmp_path / "out")


def test_out_beside_the_inbox_is_created_and_returned_as_given(tmp_path):
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    out = tmp_path / "inbox2" / "nightly"  # shares the inbox's name as a prefix: still outside
    assert check_out_location(inbox, out) == out and out.is_dir()
    assert list(out.iterdir()) == []  # the write probe leaves nothing behind


def test_out_that_is_a_file_is_refused_in_words(tmp_path):
    (tmp_path / "out").write_text("")
    with pytest.raises(ConfigError) as refused:
        check_out_location(tmp_path / "inbox", tmp_path / "out")
    assert str(refused.value) == f"--out {tmp_path / 'out'} is a file, not a folder"


# --- configured features ------------------------------------------------------------------


def test_a_feature_no_night_has_is_named_with_the_nights(tmp_path):
    items(tmp_path, NIGHTS[0], moisture_pct=1)
    items(tmp_path, NIGHTS[2], moisture_pct=1)
    with pytest.raises(ConfigError) as refused:
        check_features_present(tmp_path, NIGHTS, ["moisture_pct", "protein_pct"])
    assert str(refused.value) == (
        "rule_class.features: column protein_pct in no items table of 2026-11-01 to 2026-11-03; check the configuration's spelling"
    )


def test_several_missing_features_are_named_in_the_configured_order(tmp_path):
    items(tmp_path, NIGHTS[0], moisture_pct=1)
    with pytest.raises(ConfigError) as refused:
        check_features_present(tmp_path, NIGHTS[:1], ["test_weight", "moisture_pct", "falling_number"])
    assert str(refused.value) == (
        "rule_class.features: columns test_weight, falling_number in no items table of 2026-11-01; check the configuration's spelling"
    )


def test_a_feature_in_any_one_night_is_enough(tmp_path):
    items(tmp_path, NIGHTS[0], moisture_pct=1)
    items(tmp_path, NIGHTS[1], moisture_pct=1, protein_pct=1)
    check_features_present(tmp_path, NIGHTS[:2], ["moisture_pct", "protein_pct"])  # the night lacking it is its own input error


def test_nights_without_a_readable_items_table_refuse_nothing(tmp_path):
    (tmp_path / f"batch_date={NIGHTS[0]}").mkdir()  # no items table
    (tmp_path / f"batch_date={NIGHTS[1]}").mkdir()
    (tmp_path / f"batch_date={NIGHTS[1]}" / "items.parquet").write_bytes(b"not parquet")
    check_features_present(tmp_path, NIGHTS, ["protein_pct"])  # each night's own screen reports its table
    check_rule_columns_present(tmp_path, NIGHTS)


def test_an_items_table_reached_through_a_link_leaving_the_inbox_is_not_read(tmp_path):
    inbox = tmp_path / "inbox"
    items(tmp_path / "elsewhere", NIGHTS[0], protein_pct=1, rule__dry=1)
    (inbox / f"batch_date={NIGHTS[0]}").mkdir(parents=True)
    os.symlink(tmp_path / "elsewhere" / f"batch_date={NIGHTS[0]}" / "items.parquet", inbox / f"batch_date={NIGHTS[0]}" / "items.parquet")
    items(inbox, NIGHTS[1], moisture_pct=1)
    # the linked table has protein_pct and a rule column, but only the night inside the inbox counts
    with pytest.raises(ConfigError, match="column protein_pct in no items table of 2026-11-01 to 2026-11-02"):
        check_features_present(inbox, NIGHTS[:2], ["protein_pct"])
    with pytest.raises(ConfigError, match="rule_class.kind 'listed'"):
        check_rule_columns_present(inbox, NIGHTS[:2])


def test_no_configured_feature_reads_nothing(tmp_path):
    check_features_present(tmp_path / "no-such-inbox", NIGHTS, [])


# --- rule__ columns and the registry-driven check --------------------------------------------


def test_listed_rules_need_some_rule_column_in_some_night(tmp_path):
    items(tmp_path, NIGHTS[0], moisture_pct=1)
    with pytest.raises(ConfigError) as refused:
        check_rule_columns_present(tmp_path, NIGHTS[:1])
    assert str(refused.value) == (
        "rule_class.kind 'listed': no items table of 2026-11-01 has a rule__<name> column "
        "(the candidate rules); add them to items.parquet or choose another rule class"
    )
    items(tmp_path, NIGHTS[1], rule__dry_and_heavy=1)
    check_rule_columns_present(tmp_path, NIGHTS[:2])


def test_a_column_merely_containing_rule_is_not_a_rule_column(tmp_path):
    items(tmp_path, NIGHTS[0], moisture_rule__x=1, Rule__dry=1)
    with pytest.raises(ConfigError, match="rule__<name> column"):
        check_rule_columns_present(tmp_path, NIGHTS[:1])


def _config(tmp_path, rule_class: dict):
    return load_config(write_config(tmp_path / "config.yaml", rule_class=rule_class))


def test_the_threshold_class_checks_its_features(tmp_path):
    inbox = tmp_path / "inbox"
    items(inbox, NIGHTS[0], moisture_pct=1)
    config = _config(tmp_path, {"kind": "threshold", "features": ["moisture_pct", "falling_number_s"]})
    with pytest.raises(ConfigError, match=r"^rule_class\.features: column falling_number_s in no items table of 2026-11-01;"):
        check_configured_columns(inbox, NIGHTS[:1], config)


def test_the_listed_class_checks_rule_columns_and_no_features(tmp_path):
    inbox = tmp_path / "inbox"
    items(inbox, NIGHTS[0], moisture_pct=1)
    config = _config(tmp_path, {"kind": "listed"})
    with pytest.raises(ConfigError, match=r"^rule_class\.kind 'listed': no items table of 2026-11-01 has a rule__<name> column"):
        check_configured_columns(inbox, NIGHTS[:1], config)
    items(inbox, NIGHTS[0], rule__wet=1)
    check_configured_columns(inbox, NIGHTS[:1], config)


def test_the_constant_class_needs_no_column(tmp_path):
    inbox = tmp_path / "inbox"
    items(inbox, NIGHTS[0])  # item_id only
    check_configured_columns(inbox, NIGHTS[:1], _config(tmp_path, {"kind": "constant"}))
    # features listed for a class that reads none are not checked (the registry: needs_features is False)
    check_configured_columns(inbox, NIGHTS[:1], _config(tmp_path, {"kind": "constant", "features": ["protein_pct"]}))


def test_a_kind_missing_from_the_registry_is_one_configuration_line(tmp_path):
    # the configuration validates the kind; this is a registry changed since (a plain namespace stands in)
    config = SimpleNamespace(rule_class=SimpleNamespace(kind="oblique", features=[]))
    with pytest.raises(ConfigError) as refused:
        check_configured_columns(tmp_path, NIGHTS, config)
    assert str(refused.value) == "unknown rule class 'oblique'; expected one of constant, threshold, listed"
