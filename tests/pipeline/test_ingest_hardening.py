"""Regression tests of issue 11's input side: inputs that crashed, leaked or were ignored.

Most run the real pipeline in this process (``screen.screen``: real Parquet, real files,
real publishing); ``test_cli_*`` run the real command line in a child process.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from inboxes import checksums, cli, write_batch, write_config, write_labels
from truthsieve.exceptions import ConfigError
from truthsieve.pipeline import ingest
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.locations import check_features_present, check_out_location
from truthsieve.pipeline.screen import screen

DATE = "2026-11-03"
IDS = [f"lot-{k:05d}" for k in range(120)]


def _screen(tmp_path, inbox, **config):
    result = screen(inbox, DATE, load_config(write_config(tmp_path / "c.yaml", **config)), tmp_path / "out")
    return result.decision, result.output


def _errors(decision, rule):
    return [e for e in decision["errors"] if e["rule"] == rule]


# --- multi-file sources -------------------------------------------------------------


def test_a_source_delivered_as_several_files_is_read_as_one(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    whole = pq.read_table(folder / "source_id=north" / "labels.parquet")
    (folder / "source_id=north" / "labels.parquet").unlink()
    # one file per shift: rows 0-49, 50-119
    pq.write_table(whole.slice(0, 50), folder / "source_id=north" / "shift-1.parquet")
    pq.write_table(whole.slice(50), folder / "source_id=north" / "shift-2.parquet")
    decision, _ = _screen(tmp_path, inbox)
    assert decision["errors"] == []
    north = next(s for s in decision["sources"] if s["source_id"] == "north")
    assert north["items"] == 120  # 50 + 70
    assert sorted(f["path"].rsplit("/", 1)[1] for f in decision["inputs"] if f["source_id"] == "north") == ["shift-1.parquet", "shift-2.parquet"]


def test_a_label_repeated_across_two_files_names_both_files(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    # a.parquet sorts first; its row 3 is lot-00007, which labels.parquet also has (row 8)
    write_labels(folder, "south", ["lot-00100", "lot-00101", "lot-00007"], [1, 0, 1], name="a.parquet")
    before = checksums(inbox)
    decision, output = _screen(tmp_path, inbox)
    duplicates = _errors(decision, "duplicate_label")
    assert len(duplicates) == 3  # lot-00100, lot-00101, lot-00007 each appear again in labels.parquet
    record = next(e for e in duplicates if e["row"] == 8)
    assert record["file"] == f"batch_date={DATE}/source_id=south/labels.parquet" and record["column"] == "item_id"
    assert f"batch_date={DATE}/source_id=south/a.parquet row 3" in record["message"]
    assert {"source_id": "south", "why": "quarantined"} in decision["absent"]
    assert (output / "quarantine" / "source_id=south" / "a.parquet").read_bytes() == (folder / "source_id=south" / "a.parquet").read_bytes()
    assert checksums(inbox) == before


# --- numeric domain -----------------------------------------------------------------


def _rewrite_items(folder: Path, **columns):
    table = pq.read_table(folder / "items.parquet")
    for name, values in columns.items():
        array = pa.array(values)
        table = table.set_column(table.schema.get_field_index(name), name, array) if name in table.schema.names else table.append_column(name, array)
    pq.write_table(table, folder / "items.parquet")


def test_features_whose_midpoint_would_overflow_are_refused(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    moisture = pq.read_table(folder / "items.parquet").column("moisture_pct").to_pylist()
    moisture[0], moisture[1] = 1.7e308, 1.6e308  # (a + b) / 2 = inf in float64
    _rewrite_items(folder, moisture_pct=moisture)
    decision, _ = _screen(tmp_path, inbox)
    records = _errors(decision, "feature_out_of_range")
    assert [(r["row"], r["column"]) for r in records] == [(1, "moisture_pct"), (2, "moisture_pct")]
    assert decision["route"] == "review" and decision["consensus"] is None


def test_feature_at_the_documented_bound_is_accepted(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    falling = pq.read_table(folder / "items.parquet").column("falling_number_s").to_pylist()
    falling[0] = -ingest.FEATURE_LIMIT  # exactly at the bound: inside the domain
    _rewrite_items(folder, falling_number_s=falling)
    decision, output = _screen(tmp_path, inbox)
    assert decision["errors"] == [] and decision["consensus"] is not None
    json.loads((output / "decision.json").read_text())  # finite numbers only (publishing refuses NaN)


@pytest.mark.parametrize(
    ("weights", "rule", "row"),
    [
        ([1e308] + [1.0] * 119, "item_weight_out_of_range", 1),
        ([1.0] * 119 + [1e-151], "item_weight_out_of_range", 120),
        ([1e149] * 120, "item_weight_total_out_of_range", None),  # 1.2e151 > 1e150; each one is in range
        ([0.0] * 120, "zero_total_item_weight", None),
    ],
)
def test_item_weights_outside_the_numeric_domain_are_refused(tmp_path, weights, rule, row):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    _rewrite_items(folder, item_weight=weights)
    decision, _ = _screen(tmp_path, inbox)
    records = _errors(decision, rule)
    assert [(r["row"], r["column"]) for r in records] == [(row, "item_weight")]
    assert decision["route"] == "review"
    assert any(r["code"] == "items_invalid" for r in decision["reasons"])


def test_huge_but_summable_weights_fit_as_if_scaled(tmp_path):
    # 120 items of weight 1e147 sum to 1.2e149 <= 1e150: inside the domain; scaling every
    # weight leaves every risk unchanged, so the consensus is the unit-weight one.
    inbox = tmp_path / "inbox"
    write_batch(inbox, DATE)
    (tmp_path / "a").mkdir()
    plain, _ = _screen(tmp_path / "a", inbox)
    _rewrite_items(ingest.batch_folder(inbox, DATE), item_weight=[1e147] * 120)
    scaled, _ = _screen(tmp_path, inbox)
    assert scaled["errors"] == []
    assert scaled["consensus"]["rule"] == plain["consensus"]["rule"]
    assert scaled["consensus"]["risk"] == pytest.approx(plain["consensus"]["risk"], rel=1e-12)
    # Kish's effective sample size is scale-free too, so the Wilson intervals must match
    for a, b in zip(scaled["sources"], plain["sources"]):
        assert a["disagreement_interval"] == pytest.approx(b["disagreement_interval"], rel=1e-9)


# --- ids, names ---------------------------------------------------------------------


def test_ids_that_differ_by_a_trailing_nul_are_refused(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    ids = list(IDS)
    ids[5] = "lot-00004\x00"  # looks like row 5's id
    _rewrite_items(folder, item_id=ids)
    decision, _ = _screen(tmp_path, inbox)
    assert [(e["row"], e["column"]) for e in _errors(decision, "control_character_in_id")] == [(6, "item_id")]


def test_a_label_id_with_a_control_character_quarantines_the_source(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    write_labels(folder, "east", IDS[:3] + ["lot-00003\t"], [1, 1, 0, 0])
    decision, _ = _screen(tmp_path, inbox)
    record = _errors(decision, "control_character_in_id")
    assert [(r["file"], r["row"]) for r in record] == [(f"batch_date={DATE}/source_id=east/labels.parquet", 4)]


def test_non_utf8_names_become_notes_or_errors_without_a_crash(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    odd = os.fsdecode(b"caf\xe9")
    (folder / f"source_id={odd}").mkdir()
    (folder / "source_id=lab" / f"{odd}.parquet").write_bytes((folder / "source_id=lab" / "labels.parquet").read_bytes())
    decision, output = _screen(tmp_path, inbox)
    notes = {(n["code"], n["path"]) for n in decision["notes"]}
    assert ("undecodable_name", f"batch_date={DATE}/source_id=caf\\xe9") in notes
    assert [e["file"] for e in _errors(decision, "undecodable_name")] == [f"batch_date={DATE}/source_id=lab/caf\\xe9.parquet"]
    assert {"source_id": "lab", "why": "quarantined"} in decision["absent"]
    assert "caf\\xe9" in (output / "report.html").read_text()


# --- links --------------------------------------------------------------------------


def test_links_leaving_the_inbox_are_never_read_or_copied(tmp_path):
    inbox, outside = tmp_path / "inbox", tmp_path / "elsewhere"
    folder = write_batch(inbox, DATE)
    write_batch(outside, DATE, seed=9)
    secret = tmp_path / "secret.parquet"
    secret.write_bytes(b"PAR1 not for the quarantine PAR1")
    os.symlink(secret, folder / "source_id=lab" / "extra.parquet")
    os.rename(folder / "source_id=east", tmp_path / "east-real")
    os.symlink(outside / f"batch_date={DATE}" / "source_id=east", folder / "source_id=east")
    (folder / "items.parquet").unlink()
    os.symlink(secret, folder / "items.parquet")
    decision, output = _screen(tmp_path, inbox)
    refused = sorted(e["file"] for e in _errors(decision, "link_outside_inbox"))
    assert refused == [f"batch_date={DATE}/{p}" for p in ("items.parquet", "source_id=east", "source_id=lab/extra.parquet")]
    published = b"".join(p.read_bytes() for p in output.rglob("*") if p.is_file())
    assert b"not for the quarantine" not in published
    assert str(outside) not in published.decode(errors="replace")
    assert not (output / "quarantine" / "items.parquet").exists()


def test_a_link_inside_the_inbox_is_followed(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    shared = inbox / "shared" / "north.parquet"
    shared.parent.mkdir()
    os.rename(folder / "source_id=north" / "labels.parquet", shared)
    os.symlink(shared, folder / "source_id=north" / "labels.parquet")
    decision, _ = _screen(tmp_path, inbox)
    assert decision["errors"] == [] and "north" in [s["source_id"] for s in decision["sources"]]


def test_quarantine_copies_from_a_summary_are_the_validated_bytes(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    bad = folder / "source_id=south" / "labels.parquet"
    bad.write_bytes(b"not parquet")
    check = ingest.validate_source(inbox, folder / "source_id=south", {"south": 1}, None)
    rebuilt = ingest.FileCheck.from_summary(json.loads(json.dumps(check.summary())), None)
    assert ingest.quarantine_bytes(inbox, rebuilt) == {f"batch_date={DATE}/source_id=south/labels.parquet": b"not parquet"}
    bad.write_bytes(b"other bytes")  # changed after validation: not what was validated, not copied
    assert ingest.quarantine_bytes(inbox, rebuilt) == {}
    bad.unlink()
    os.symlink("/etc/passwd", bad)  # swapped for a link after validation: not copied
    assert ingest.quarantine_bytes(inbox, rebuilt) == {}
    assert ingest.quarantine_bytes(inbox, check) == {f"batch_date={DATE}/source_id=south/labels.parquet": b"not parquet"}


# --- layout notes and absence --------------------------------------------------------


def test_entries_outside_the_layout_become_notes_and_some_errors(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    (folder / "README.txt").write_text("delivered by the night shift")
    (folder / "Source_id=north").mkdir()
    (folder / "source_id=west").write_text("")
    (folder / "extra.parquet").write_bytes(b"")
    (folder / "Items.parquet").write_bytes(b"")
    (folder / "source_id=east" / "late.PARQUET").write_bytes((folder / "source_id=east" / "labels.parquet").read_bytes())
    (folder / "source_id=south" / "labels.csv").write_text("item_id,label\nlot-00001,1\n")
    (folder / "source_id=lab" / "notes.txt").write_text("")
    (folder / "source_id=lab" / "old").mkdir()
    decision, output = _screen(tmp_path, inbox)
    prefix = f"batch_date={DATE}/"
    assert sorted((n["code"], n["path"].removeprefix(prefix)) for n in decision["notes"]) == [
        ("misnamed_items_file", "Items.parquet"),
        ("misnamed_label_file", "source_id=east/late.PARQUET"),
        ("misnamed_label_file", "source_id=south/labels.csv"),
        ("misnamed_source_folder", "Source_id=north"),
        ("source_not_a_folder", "source_id=west"),
        ("stray_file", "README.txt"),
        ("stray_file", "source_id=lab/notes.txt"),
        ("stray_folder", "source_id=lab/old"),
        ("stray_parquet", "extra.parquet"),
    ]
    assert sorted(e["file"].removeprefix(prefix) for e in _errors(decision, "misnamed_label_file")) == ["source_id=east/late.PARQUET", "source_id=south/labels.csv"]
    assert decision["absent"] == [{"source_id": "east", "why": "quarantined"}, {"source_id": "south", "why": "quarantined"}]
    assert "lab" in [s["source_id"] for s in decision["sources"]]  # a README-like file is only a note
    report = (output / "report.html").read_text()
    assert "Source_id=north" in report and "misnamed_source_folder" in report


def test_a_registered_source_without_a_folder_is_listed_absent(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    for child in (folder / "source_id=east").iterdir():
        child.unlink()
    (folder / "source_id=east").rmdir()
    decision, output = _screen(tmp_path, inbox)
    assert decision["absent"] == [{"source_id": "east", "why": "no_folder"}]
    assert "no_folder" in (output / "report.html").read_text()


def test_a_clean_batch_adds_only_empty_notes_and_absent(tmp_path):
    inbox = tmp_path / "inbox"
    write_batch(inbox, DATE)
    decision, _ = _screen(tmp_path, inbox)
    assert decision["notes"] == [] and decision["absent"] == [] and decision["errors"] == []


# --- analysis that failed after validation ------------------------------------------------


def test_a_source_whose_items_all_weigh_zero_is_quarantined(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    _rewrite_items(folder, item_weight=[0.0] * 10 + [1.0] * 110)
    write_labels(folder, "east", IDS[:10], [1] * 10)  # east labelled only the ten zero-weight items
    decision, output = _screen(tmp_path, inbox)
    records = _errors(decision, "no_positive_weight")
    assert [(r["file"], r["column"]) for r in records] == [(f"batch_date={DATE}/source_id=east", "item_weight")]
    assert decision["consensus"] is not None and "east" not in [s["source_id"] for s in decision["sources"]]
    assert (output / "quarantine" / "source_id=east" / "labels.parquet").is_file()


def test_every_feature_constant_gets_a_reasoned_review_decision(tmp_path):
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    _rewrite_items(folder, moisture_pct=[12.0] * 120, falling_number_s=[300.0] * 120)
    decision, output = _screen(tmp_path, inbox)
    assert [(e["rule"], e["column"]) for e in decision["errors"]] == [("constant_features", "moisture_pct")]
    assert decision["route"] == "review" and (output / "review.json").is_file()


# --- the configuration names a column the items table lacks ---------------------------


def test_a_misspelt_feature_says_the_configuration_is_at_fault(tmp_path):
    inbox = tmp_path / "inbox"
    write_batch(inbox, DATE)
    decision, _ = _screen(tmp_path, inbox, rule_class={"kind": "threshold", "features": ["moisture_pc"]})
    [record] = decision["errors"]
    assert (record["rule"], record["column"], record["row"]) == ("configured_column_missing", "moisture_pc", None)
    assert "configuration" in record["message"] and "rule_class.features" in record["message"]


def test_feature_check_reads_schemas_of_every_night(tmp_path):
    inbox = tmp_path / "inbox"
    write_batch(inbox, "2026-11-01")
    folder = write_batch(inbox, "2026-11-02")
    _rewrite_items(folder, protein_pct=[11.0] * 120)  # only the second night has it
    check_features_present(inbox, ["2026-11-01", "2026-11-02"], ["moisture_pct", "protein_pct"])
    with pytest.raises(ConfigError, match=r"^rule_class\.features: column protein_pct in no items table of 2026-11-01;"):
        check_features_present(inbox, ["2026-11-01"], ["moisture_pct", "protein_pct"])


# --- where outputs may go -------------------------------------------------------------


@pytest.mark.parametrize("where", ["same", "inside", "contains", "link_to_inbox", "inside_via_link"])
def test_out_overlapping_the_inbox_is_refused(tmp_path, where):
    inbox = tmp_path / "data" / "inbox"
    inbox.mkdir(parents=True)
    os.symlink(inbox, tmp_path / "alias")
    out = {
        "same": inbox,
        "inside": inbox / "out",
        "contains": tmp_path / "data",
        "link_to_inbox": tmp_path / "alias",
        "inside_via_link": tmp_path / "alias" / "nested" / "out",
    }[where]
    with pytest.raises(ConfigError, match="--out"):
        check_out_location(inbox, out)
    assert not (inbox / "out").exists() and not (inbox / "nested").exists()


def test_out_beside_the_inbox_is_accepted_and_created(tmp_path):
    assert check_out_location(tmp_path / "inbox", tmp_path / "inbox-out" / "x").is_dir()


@pytest.mark.parametrize("where", ["file", "under_a_file", "unwritable"])
def test_out_that_cannot_hold_outputs_is_refused(tmp_path, where):
    (tmp_path / "plain").write_text("")
    out = {"file": tmp_path / "plain", "under_a_file": tmp_path / "plain" / "out", "unwritable": Path("/proc/truthsieve-out")}[where]
    with pytest.raises(ConfigError, match=r"^--out "):
        check_out_location(tmp_path / "inbox", out)


def test_cli_refuses_out_equal_to_inbox_and_keeps_every_input(tmp_path):
    inbox = tmp_path / "inbox"
    write_batch(inbox, DATE)
    before = checksums(inbox)
    config = str(write_config(tmp_path / "c.yaml"))
    for command in (["screen", "--date", DATE], ["backfill", "--from", DATE, "--to", DATE]):
        result = cli(*command, "--inbox", str(inbox), "--config", config, "--out", str(inbox))
        assert result.returncode == 2, result.stderr
        assert result.stderr.count("\n") == 1 and "--out" in result.stderr and "Traceback" not in result.stderr
    assert checksums(inbox) == before


def test_cli_refuses_an_out_that_is_a_file_in_one_line(tmp_path):
    inbox = tmp_path / "inbox"
    write_batch(inbox, DATE)
    (tmp_path / "out").write_text("")
    result = cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(write_config(tmp_path / "c.yaml")), "--out", str(tmp_path / "out"))
    assert (result.returncode, result.stderr.count("\n")) == (2, 1) and "is a file" in result.stderr


def test_cli_misspelt_feature_is_a_configuration_error(tmp_path):
    inbox = tmp_path / "inbox"
    write_batch(inbox, "2026-11-01")
    write_batch(inbox, "2026-11-02")
    config = write_config(tmp_path / "c.yaml", rule_class={"kind": "threshold", "features": ["moisture_pc"]})
    result = cli("backfill", "--inbox", str(inbox), "--from", "2026-11-01", "--to", "2026-11-02", "--config", str(config), "--out", str(tmp_path / "out"))
    assert result.returncode == 2 and result.stderr.count("\n") == 1
    assert "rule_class.features" in result.stderr and "moisture_pc" in result.stderr
    assert not list((tmp_path / "out").glob("batch_date=*"))
