"""What a newcomer's mistakes must give: exit 2, one line, and no trace left behind.

A refused run (a configuration error, a date with no batch folder) must not create the
``--out`` folder: an empty output root looks like a run that happened.
"""

from __future__ import annotations

import json

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from cli_support import one_line_error
from inboxes import checksums, cli, write_batch, write_config

DATE = "2026-11-03"



@pytest.fixture(scope="module")
def inbox(tmp_path_factory):
    root = tmp_path_factory.mktemp("refusals")
    write_batch(root / "inbox", DATE, seed=3, n_items=40)
    return root / "inbox"


def test_screening_a_date_without_a_batch_folder_leaves_no_out_folder(inbox, tmp_path):
    out = tmp_path / "out"
    message = one_line_error(cli("screen", "--inbox", str(inbox), "--date", "2026-11-04", "--config", str(write_config(tmp_path / "c.yaml")), "--out", str(out)))
    assert "batch_date=2026-11-04" in message and "no such batch folder" in message
    assert not out.exists()


def test_a_backfill_with_no_batch_folder_leaves_no_out_folder(inbox, tmp_path):
    out = tmp_path / "out"
    message = one_line_error(cli(
        "backfill", "--inbox", str(inbox), "--from", "2026-12-01", "--to", "2026-12-02",
        "--config", str(write_config(tmp_path / "c.yaml")), "--out", str(out),
    ))
    assert "no batch folders" in message
    assert not out.exists()


@pytest.mark.parametrize("command", ["screen", "backfill"])
def test_a_misspelt_feature_leaves_no_out_folder(inbox, tmp_path, command):
    config = write_config(tmp_path / "c.yaml", rule_class={"kind": "threshold", "features": ["moisture_pc"]})
    out = tmp_path / "out"
    dates = ["--date", DATE] if command == "screen" else ["--from", DATE, "--to", DATE]
    message = one_line_error(cli(command, "--inbox", str(inbox), *dates, "--config", str(config), "--out", str(out)))
    assert "rule_class.features" in message and "moisture_pc" in message
    assert not out.exists()


def test_an_out_folder_inside_the_inbox_is_refused_and_not_created(inbox, tmp_path):
    before = checksums(inbox)
    out = inbox / "results"
    message = one_line_error(cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(write_config(tmp_path / "c.yaml")), "--out", str(out)))
    assert "inside the inbox" in message
    assert not out.exists() and checksums(inbox) == before


def _listed_night(root, with_rule_columns: bool):
    folder = write_batch(root, DATE, seed=5, n_items=12)
    if with_rule_columns:
        table = pq.read_table(folder / "items.parquet")
        moisture = table.column("moisture_pct").to_numpy()
        pq.write_table(table.append_column("rule__dry", pa.array(moisture <= 14.0)), folder / "items.parquet")
    return folder


def test_a_listed_class_with_no_rule_columns_in_any_items_table_is_a_configuration_error(tmp_path):
    # kind: listed names no columns, so the configuration is what is wrong when no night has
    # any rule__* column (as with a feature no items table has): exit 2, one line, nothing written.
    inbox = tmp_path / "inbox"
    _listed_night(inbox, with_rule_columns=False)
    before = checksums(inbox)
    config = write_config(tmp_path / "c.yaml", rule_class={"kind": "listed"})
    out = tmp_path / "out"
    for args in (["screen", "--date", DATE], ["backfill", "--from", DATE, "--to", DATE]):
        message = one_line_error(cli(args[0], "--inbox", str(inbox), *args[1:], "--config", str(config), "--out", str(out)))
        assert "rule_class.kind 'listed'" in message and "rule__" in message and DATE in message
        assert not out.exists()
    assert checksums(inbox) == before


def test_a_listed_class_night_lacking_rule_columns_among_nights_that_have_them_is_an_input_error(tmp_path):
    # Some nights of the range hold rule__* columns: the configuration is right, the night that
    # lacks them is bad input (its items table quarantined, the night sent to review).
    inbox = tmp_path / "inbox"
    _listed_night(inbox, with_rule_columns=True)
    later = "2026-11-04"
    folder = write_batch(inbox, later, seed=6, n_items=12)
    config = write_config(tmp_path / "c.yaml", rule_class={"kind": "listed"})
    out = tmp_path / "out"
    result = cli("backfill", "--inbox", str(inbox), "--from", DATE, "--to", later, "--config", str(config), "--out", str(out))
    assert result.returncode == 0, result.stderr
    decision = json.loads((out / f"batch_date={later}" / "decision.json").read_text())
    assert decision["route"] == "review"
    assert [(e["file"], e["code"]) for e in decision["errors"]] == [(f"batch_date={later}/items.parquet", "table_lacks_column")]
    assert (out / f"batch_date={later}" / "quarantine" / "items.parquet").read_bytes() == (folder / "items.parquet").read_bytes()


@pytest.mark.parametrize(
    "written, shown",
    [("yes", "bool True"), ("off", "bool False"), ("3", "int 3"), ("1.5", "float 1.5"), ("null", "null None"), ("~", "null None")],
)
def test_a_class_name_yaml_reads_as_another_type_is_named_with_the_fix(inbox, tmp_path, written, shown):
    # YAML 1.1 (PyYAML's safe loader) reads these unquoted words as bool, int, float or null
    config = tmp_path / "c.yaml"
    write_config(config)
    config.write_text(config.read_text() + f"classes: [reject, feed, {written}]\n")
    out = tmp_path / "out"
    message = one_line_error(cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(config), "--out", str(out)))
    assert f"classes: Value error, class 2 must be a name (a string), not {shown}" in message and "quote the name" in message
    assert not out.exists()


@pytest.mark.parametrize("command", [["in-force"], ["in-force", "--json"], ["apply", "--items", "lots.parquet", "--write", "x.parquet"]])
def test_a_mistyped_out_folder_is_refused_not_read_as_no_rule_in_force(tmp_path, command):
    # `ledger --verify` and `verdict` already refuse it; in-force said "no rule in force" and exit 0
    missing = tmp_path / "out-typo"
    message = one_line_error(cli(command[0], "--out", str(missing), *command[1:]))
    assert message == f"error: no such out folder: {missing}"
    assert not missing.exists()
