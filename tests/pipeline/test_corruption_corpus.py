"""The corruption corpus: one table of broken inputs, each run through the real pipeline.

Every case writes a clean night (``inboxes.write_batch``), breaks one thing, screens it
and checks: an error record with the expected rule naming the file (inbox-relative),
the row (1 = first row; None when the problem is not about one row) and the column; a
decision routed to review when the items table is at fault, aggregated without the source
(listed as absent, ``why: quarantined``) when a source is; a byte copy of the offending file in ``quarantine/`` or, for
entries that are never read (links leaving the inbox, misnamed or undecodable names), a
documented refusal (the rule is one of ``layout.NOTE_CODES`` and nothing is copied);
and every input file's sha256 unchanged. A dozen cases also run through the real
command line in a child process.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from inboxes import SOURCES, checksums, cli, write_batch, write_config, write_labels
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.layout import NOTE_CODES
from truthsieve.pipeline.screen import screen

DATE = "2026-11-03"
N = 120
IDS = [f"lot-{k:05d}" for k in range(N)]
OK = np.zeros(N, dtype=bool)


@dataclass(frozen=True)
class Case:
    name: str
    breaks: Callable[[Path], Path]  # batch folder -> the entry the error record must name
    rule: str
    row: int | None
    column: str | None
    copied: bool = True  # False: a documented refusal, nothing is read or copied


def _labels(folder: Path, table: pa.Table, name: str = "labels.parquet", source: str = "south") -> Path:
    path = folder / f"source_id={source}" / name
    pq.write_table(table, path)
    return path


def _label_table(ids=IDS, label=OK, **extra) -> pa.Table:
    return pa.table({"item_id": ids, "label": label, **extra})


def _with_label_at(row: int, value, kind=pa.int64()) -> Callable[[Path], Path]:
    def breaks(folder):
        labels = [0] * N
        labels[row - 1] = value
        return _labels(folder, _label_table(label=pa.array(labels, kind)))
    return breaks


def _with_id_at(row: int, value) -> Callable[[Path], Path]:
    def breaks(folder):
        ids = list(IDS)
        ids[row - 1] = value
        return _labels(folder, _label_table(ids=pa.array(ids, pa.string())))
    return breaks


def _bytes(content: bytes, name: str = "labels.parquet") -> Callable[[Path], Path]:
    def breaks(folder):
        path = folder / "source_id=south" / name
        path.write_bytes(content)
        return path
    return breaks


def _truncated(name: str = "source_id=south/labels.parquet") -> Callable[[Path], Path]:
    def breaks(folder):
        path = folder / name
        path.write_bytes(path.read_bytes()[:200])
        return path
    return breaks


def _items(change: Callable[[pa.Table], pa.Table]) -> Callable[[Path], Path]:
    def breaks(folder):
        path = folder / "items.parquet"
        pq.write_table(change(pq.read_table(path)), path)
        return path
    return breaks


def _set(table: pa.Table, name: str, values, kind=None) -> pa.Table:
    array = pa.array(values, kind)
    if name in table.schema.names:
        return table.set_column(table.schema.get_field_index(name), name, array)
    return table.append_column(name, array)


def _at(row: int, value, base: float = 1.0) -> list:
    values = [base] * N
    values[row - 1] = value
    return values


def _feature_at(row: int, value) -> Callable[[Path], Path]:
    def change(table):
        values = table.column("moisture_pct").to_pylist()
        values[row - 1] = value
        return _set(table, "moisture_pct", values, pa.float64())
    return _items(change)


def _weights(values) -> Callable[[Path], Path]:
    return _items(lambda t: _set(t, "item_weight", values, pa.float64()))


def _source_folder(name: str, files: dict[str, bytes | None] | None = None) -> Callable[[Path], Path]:
    def breaks(folder):
        path = folder / f"source_id={name}"
        path.mkdir()
        for file, content in (files or {"labels.parquet": None}).items():
            if content is None:
                pq.write_table(_label_table(), path / file)
            else:
                (path / file).write_bytes(content)
        return path
    return breaks


def _emptied(files: dict[str, bytes]) -> Callable[[Path], Path]:
    def breaks(folder):
        path = folder / "source_id=south"
        (path / "labels.parquet").unlink()
        for file, content in files.items():
            (path / file).write_bytes(content)
        return path
    return breaks


def _link_outside(entry: str) -> Callable[[Path], Path]:
    def breaks(folder):
        outside = folder.parent.parent / "outside"
        outside.mkdir(exist_ok=True)
        path = folder / entry
        if entry.startswith("source_id=") and "/" not in entry:
            os.rename(path, outside / "source")
            target = outside / "source"
        else:
            target = outside / "target.parquet"
            target.write_bytes(path.read_bytes() if path.exists() else b"PAR1")
            if path.exists():
                path.unlink()
        os.symlink(target, path)
        return path
    return breaks


def _misnamed(name: str) -> Callable[[Path], Path]:
    def breaks(folder):
        path = folder / "source_id=south" / name
        path.write_bytes((folder / "source_id=south" / "labels.parquet").read_bytes())
        return path
    return breaks


def _second_file(folder: Path) -> Path:
    # labels.parquet (lot-00000..lot-00099) sorts before z.parquet; z.parquet row 1 is new,
    # row 2 repeats lot-00004, which is row 5 of labels.parquet
    write_labels(folder, "south", IDS[:100], np.zeros(100))
    return _labels(folder, _label_table(ids=["lot-00100", "lot-00004"], label=[True, False]), name="z.parquet")


def _zero_weight_source(folder: Path) -> Path:
    pq.write_table(_set(pq.read_table(folder / "items.parquet"), "item_weight", [0.0] * 5 + [1.0] * (N - 5)), folder / "items.parquet")
    write_labels(folder, "south", IDS[:5], [1, 0, 1, 0, 1])
    return folder / "source_id=south"


def _removed(name: str) -> Callable[[Path], Path]:
    def breaks(folder):
        path = folder / name
        path.unlink()
        return path
    return breaks


def _items_folder(folder: Path) -> Path:
    path = folder / "items.parquet"
    path.unlink()
    path.mkdir()
    return path


def _undecodable(folder: Path) -> Path:
    path = folder / "source_id=south" / os.fsdecode(b"\xff\xfelabels.parquet")
    path.write_bytes((folder / "source_id=south" / "labels.parquet").read_bytes())
    return path


def _many_bad_rows(folder: Path) -> Path:
    labels = np.zeros(N, dtype=np.int64)
    labels[:25] = 3
    return _labels(folder, _label_table(label=labels))


CASES = [
    # label files: schema
    Case("label_column_missing", lambda f: _labels(f, pa.table({"item_id": IDS})), "missing_column", None, "label"),
    Case("item_id_column_missing", lambda f: _labels(f, pa.table({"label": OK})), "missing_column", None, "item_id"),
    Case("extra_column", lambda f: _labels(f, _label_table(grader=["x"] * N)), "extra_column", None, "grader"),
    Case("label_as_text", lambda f: _labels(f, _label_table(label=["yes"] * N)), "wrong_type", None, "label"),
    Case("label_as_float", lambda f: _labels(f, _label_table(label=np.zeros(N))), "wrong_type", None, "label"),
    Case("label_as_list", lambda f: _labels(f, _label_table(label=pa.array([[0]] * N))), "wrong_type", None, "label"),
    Case("label_dictionary", lambda f: _labels(f, _label_table(label=pa.array(["0"] * N).dictionary_encode())), "wrong_type", None, "label"),
    Case("item_id_as_int", lambda f: _labels(f, _label_table(ids=list(range(N)))), "wrong_type", None, "item_id"),
    Case("item_id_as_binary", lambda f: _labels(f, _label_table(ids=pa.array([i.encode() for i in IDS], pa.binary()))), "wrong_type", None, "item_id"),
    # label files: values
    Case("label_seven", _with_label_at(5, 7), "label_out_of_range", 5, "label"),
    Case("label_minus_one", _with_label_at(1, -1), "label_out_of_range", 1, "label"),
    Case("label_two_int8", _with_label_at(120, 2, pa.int8()), "label_out_of_range", 120, "label"),
    Case("label_255_uint8", _with_label_at(9, 255, pa.uint8()), "label_out_of_range", 9, "label"),
    Case("label_huge", _with_label_at(3, 2**40), "label_out_of_range", 3, "label"),
    Case("label_null", lambda f: _labels(f, _label_table(label=pa.array([None] + [True] * (N - 1), pa.bool_()))), "null_label", 1, "label"),
    Case("label_null_int", _with_label_at(60, None), "null_label", 60, "label"),
    Case("many_bad_rows", _many_bad_rows, "label_out_of_range", 1, "label"),
    Case("item_id_null", _with_id_at(3, None), "null_item_id", 3, "item_id"),
    Case("item_id_trailing_nul", _with_id_at(2, "lot-00000\x00"), "control_character_in_id", 2, "item_id"),
    Case("item_id_newline", _with_id_at(7, "lot-00006\n"), "control_character_in_id", 7, "item_id"),
    Case("item_id_delete_char", _with_id_at(8, "lot-\x7f00007"), "control_character_in_id", 8, "item_id"),
    Case("item_id_unknown", _with_id_at(120, "lot-nowhere"), "unknown_item", 120, "item_id"),
    Case("item_id_unknown_case", _with_id_at(4, "LOT-00003"), "unknown_item", 4, "item_id"),
    Case("duplicate_in_file", lambda f: _labels(f, _label_table(ids=IDS + [IDS[0]], label=np.append(OK, True))), "duplicate_label", N + 1, "item_id"),
    Case("duplicate_across_files", _second_file, "duplicate_label", 2, "item_id"),
    # label files: not Parquet, or no rows
    Case("label_file_empty", lambda f: _labels(f, _label_table(ids=pa.array([], pa.string()), label=pa.array([], pa.bool_()))), "empty_file", None, None),
    Case("label_file_truncated", _truncated(), "unreadable_parquet", None, None),
    Case("label_file_zero_bytes", _bytes(b""), "unreadable_parquet", None, None),
    Case("label_file_random_bytes", _bytes(np.random.default_rng(11).bytes(4096)), "unreadable_parquet", None, None),
    Case("label_file_is_csv", _bytes(b"item_id,label\nlot-00000,1\n"), "unreadable_parquet", None, None),
    Case("label_file_is_json", _bytes(b'[{"item_id": "lot-00000", "label": 1}]'), "unreadable_parquet", None, None),
    Case("label_file_magic_only", _bytes(b"PAR1PAR1"), "unreadable_parquet", None, None),
    Case("extra_file_unreadable", _bytes(b"PAR1\x00\x00PAR1", name="b.parquet"), "unreadable_parquet", None, None),
    # source folders and names
    Case("upper_case_suffix", _misnamed("late.PARQUET"), "misnamed_label_file", None, None, copied=False),
    Case("mixed_case_suffix", _misnamed("late.Parquet"), "misnamed_label_file", None, None, copied=False),
    Case("csv_labels", _misnamed("labels.csv"), "misnamed_label_file", None, None, copied=False),
    Case("json_labels", _misnamed("labels.json"), "misnamed_label_file", None, None, copied=False),
    Case("pq_suffix", _misnamed("labels.pq"), "misnamed_label_file", None, None, copied=False),
    Case("undecodable_label_name", _undecodable, "undecodable_name", None, None, copied=False),
    Case("label_link_outside", _link_outside("source_id=south/labels.parquet"), "link_outside_inbox", None, None, copied=False),
    Case("extra_label_link_outside", _link_outside("source_id=south/more.parquet"), "link_outside_inbox", None, None, copied=False),
    Case("source_folder_link_outside", _link_outside("source_id=south"), "link_outside_inbox", None, None, copied=False),
    Case("source_folder_empty", _emptied({}), "no_label_files", None, None, copied=False),
    Case("source_folder_only_readme", _emptied({"README.txt": b"hi"}), "no_label_files", None, None, copied=False),
    Case("source_id_with_space", _source_folder("bad name!"), "bad_source_id", None, "source_id"),
    Case("source_id_leading_dash", _source_folder("-north"), "bad_source_id", None, "source_id"),
    Case("source_id_too_long", _source_folder("a" * 65), "bad_source_id", None, "source_id"),
    Case("source_id_unicode", _source_folder("caf\u00e9"), "bad_source_id", None, "source_id"),
    Case("source_unregistered", _source_folder("stranger"), "unknown_source", None, "source_id"),
    Case("source_all_weight_zero", _zero_weight_source, "no_positive_weight", None, "item_weight"),
    # the items table: schema
    Case("items_id_missing", _items(lambda t: t.drop_columns(["item_id"])), "missing_column", None, "item_id"),
    Case("items_id_as_int", _items(lambda t: _set(t, "item_id", list(range(N)))), "wrong_type", None, "item_id"),
    Case("items_feature_as_text", _items(lambda t: _set(t, "moisture_pct", ["wet"] * N)), "wrong_type", None, "moisture_pct"),
    Case("items_extra_text_column", _items(lambda t: _set(t, "grade", ["A"] * N)), "wrong_type", None, "grade"),
    Case("items_feature_missing", _items(lambda t: t.drop_columns(["falling_number_s"])), "configured_column_missing", None, "falling_number_s"),
    Case("items_weight_as_text", _items(lambda t: _set(t, "item_weight", ["1"] * N)), "wrong_type", None, "item_weight"),
    Case("items_rule_column_not_bool", _items(lambda t: _set(t, "rule__dry", [1] * N)), "wrong_type", None, "rule__dry"),
    # the items table: values
    Case("items_duplicate_id", _items(lambda t: _set(t, "item_id", ["lot-00001"] + IDS[1:])), "duplicate_item_id", 2, "item_id"),
    Case("items_null_id", _items(lambda t: _set(t, "item_id", IDS[:9] + [None] + IDS[10:], pa.string())), "null_item_id", 10, "item_id"),
    Case("items_id_trailing_nul", _items(lambda t: _set(t, "item_id", IDS[:5] + ["lot-00004\x00"] + IDS[6:])), "control_character_in_id", 6, "item_id"),
    Case("items_feature_nan", _feature_at(1, float("nan")), "non_finite_feature", 1, "moisture_pct"),
    Case("items_feature_inf", _feature_at(2, float("inf")), "non_finite_feature", 2, "moisture_pct"),
    Case("items_feature_minus_inf", _feature_at(3, float("-inf")), "non_finite_feature", 3, "moisture_pct"),
    Case("items_feature_null", _feature_at(4, None), "non_finite_feature", 4, "moisture_pct"),
    Case("items_feature_overflowing_midpoint", _feature_at(5, 1.7e308), "feature_out_of_range", 5, "moisture_pct"),
    Case("items_feature_beyond_bound", _feature_at(6, -1e301), "feature_out_of_range", 6, "moisture_pct"),
    Case("items_weight_negative", _weights(_at(7, -1.0)), "negative_item_weight", 7, "item_weight"),
    Case("items_weight_nan", _weights(_at(8, float("nan"))), "non_finite_weight", 8, "item_weight"),
    Case("items_weight_inf", _weights(_at(9, float("inf"))), "non_finite_weight", 9, "item_weight"),
    Case("items_weight_null", _weights(_at(10, None)), "non_finite_weight", 10, "item_weight"),
    Case("items_weight_too_large", _weights(_at(11, 1e151)), "item_weight_out_of_range", 11, "item_weight"),
    Case("items_weight_too_small", _weights(_at(12, 1e-200)), "item_weight_out_of_range", 12, "item_weight"),
    Case("items_weight_total_too_large", _weights([1e149] * N), "item_weight_total_out_of_range", None, "item_weight"),
    Case("items_weight_all_zero", _weights([0.0] * N), "zero_total_item_weight", None, "item_weight"),
    Case("items_rule_value_null", _items(lambda t: _set(t, "rule__dry", [True] * (N - 1) + [None], pa.bool_())), "null_rule_value", N, "rule__dry"),
    Case("items_features_constant", _items(lambda t: _set(_set(t, "moisture_pct", [12.5] * N), "falling_number_s", [300.0] * N)), "constant_features", None, "moisture_pct"),
    Case("items_empty", _items(lambda t: t.slice(0, 0)), "empty_file", None, None),
    Case("items_truncated", _truncated("items.parquet"), "unreadable_parquet", None, None),
    Case("items_missing", _removed("items.parquet"), "missing_file", None, None, copied=False),
    Case("items_is_a_folder", _items_folder, "missing_file", None, None, copied=False),
    Case("items_link_outside", _link_outside("items.parquet"), "link_outside_inbox", None, None, copied=False),
]
REFUSALS = {"misnamed_label_file", "undecodable_name", "link_outside_inbox", "no_label_files", "missing_file"}


def test_the_corpus_is_large_and_names_are_unique():
    assert len(CASES) >= 60
    assert len({c.name for c in CASES}) == len(CASES)


def _expect(case: Case, decision: dict, folder: Path, out_batch: Path, entry: Path, before: dict, inbox: Path) -> None:
    named = entry.relative_to(inbox).as_posix().encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")
    records = [e for e in decision["errors"] if e["rule"] == case.rule and e["file"] == named]
    assert records, (named, decision["errors"])
    assert (records[0]["row"], records[0]["column"]) == (case.row, case.column)
    assert records[0]["message"]
    if case.name == "duplicate_across_files":
        assert len(records) == 1 and records[0]["message"].endswith(f"batch_date={DATE}/source_id=south/labels.parquet row 5")
    source = next((part.removeprefix("source_id=") for part in named.split("/") if part.startswith("source_id=")), None)
    if source is None:  # the items table: no rule can be fitted tonight
        assert decision["route"] == "review"
    else:  # strategy_proof routing: a quarantined source is absent, not a veto
        assert decision["route"] == "aggregate"
        if source in SOURCES:  # unregistered folders are errors, not absent members
            assert {"source_id": source, "why": "quarantined"} in decision["absent"]
    assert json.loads((out_batch / "quarantine" / "errors.json").read_text())["errors"] == decision["errors"]
    copy = out_batch / "quarantine" / entry.relative_to(folder)
    if case.copied and entry.is_dir():  # a source folder: every file in it is copied
        files = sorted(p for p in entry.iterdir())
        assert files and all((copy / p.name).read_bytes() == p.read_bytes() for p in files)
    elif case.copied:
        assert copy.read_bytes() == entry.read_bytes()
    else:
        assert case.rule in REFUSALS and (case.rule in NOTE_CODES or case.rule in ("no_label_files", "missing_file"))
        assert not copy.is_file() or copy.is_dir()
    assert checksums(inbox) == before  # inputs never modified, moved or deleted


def _prepare(tmp_path: Path, case: Case) -> tuple[Path, Path, Path, dict, Path]:
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, DATE)
    entry = case.breaks(folder)
    return inbox, folder, entry, checksums(inbox), write_config(tmp_path / "c.yaml")


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_corrupt_input_is_named_and_quarantined(tmp_path, case):
    inbox, folder, entry, before, config = _prepare(tmp_path, case)
    result = screen(inbox, DATE, load_config(config), tmp_path / "out")
    _expect(case, result.decision, folder, result.output, entry, before, inbox)


CLI_CASES = [
    "label_seven", "duplicate_across_files", "item_id_trailing_nul", "label_file_truncated", "upper_case_suffix",
    "label_link_outside", "source_folder_link_outside", "source_unregistered", "undecodable_label_name",
    "items_feature_overflowing_midpoint", "items_weight_all_zero", "items_link_outside", "source_all_weight_zero",
]


@pytest.mark.parametrize("name", CLI_CASES)
def test_corrupt_input_through_the_command_line(tmp_path, name):
    case = next(c for c in CASES if c.name == name)
    inbox, folder, entry, before, config = _prepare(tmp_path, case)
    result = cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(config), "--out", str(tmp_path / "out"))
    assert result.returncode == 0, result.stderr
    out_batch = tmp_path / "out" / f"batch_date={DATE}"
    _expect(case, json.loads((out_batch / "decision.json").read_text()), folder, out_batch, entry, before, inbox)
