"""Labels as arrays from the file to the label matrix: a valid source's check holds class
indices and item codes (positions in the items table), never a table; duplicates are
found on integer keys with the records of the string path; the whole-night matrix is
built from the codes.

Known answers: cells read back from the Parquet files with plain Python loops, records
written out by hand from the files' rows.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import yaml

from truthsieve.pipeline import analysis, ingest, work_files
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.records import ErrorRecord
from night_support import ingest_batch
from truthsieve.pipeline.store import LocalStore

DATE = "2026-11-07"
BATCH = f"batch_date={DATE}"
NAMES = ["zeta", "alpha", "Zed", "mid", "beta", "b.2", "b-1"]


def _write_night(root: Path, seed: int) -> tuple[Path, Path, set[str]]:
    """A three-class night: shuffled items with weights, partial coverage, items labelled by
    several sources, some sources over two files, and some with an item labelled twice
    (in one file or across two). Returns (inbox, config, the sources that repeat an item)."""
    rng = np.random.default_rng(seed)
    inbox, n_items = root / "inbox", int(rng.integers(2, 50))
    batch = inbox / BATCH
    batch.mkdir(parents=True)
    ids = [f"lot-{k:03d}" for k in rng.permutation(n_items)]
    features = np.round(rng.uniform(0, 10, n_items), 1)
    pq.write_table(pa.table({"item_id": ids, "f": features, "item_weight": np.round(rng.uniform(0.5, 3.0, n_items), 2)}), batch / "items.parquet")
    repeating = set()
    for name in NAMES:
        chosen = [ids[k] for k in rng.permutation(n_items)[: int(rng.integers(1, n_items + 1))]]
        labels = rng.integers(0, 3, len(chosen)).astype(np.int8)
        if len(chosen) > 1 and rng.random() < 0.3:
            chosen.append(chosen[int(rng.integers(0, len(chosen)))])  # labelled twice
            labels = np.append(labels, np.int8(rng.integers(0, 3)))
            repeating.add(name)
        cut = int(rng.integers(0, len(chosen))) if rng.random() < 0.5 else len(chosen)
        folder = batch / f"source_id={name}"
        folder.mkdir()
        for part, rows in (("a", slice(0, cut)), ("b", slice(cut, None))):
            if len(chosen[rows]):
                pq.write_table(pa.table({"item_id": chosen[rows], "label": pa.array(labels[rows])}), folder / f"{part}.parquet")
    config = root / "c.yaml"
    config.write_text(yaml.safe_dump({
        "rule_class": {"kind": "threshold", "features": ["f"]}, "mechanism": "tuned_dictator", "classes": ["low", "mid", "high"],
        "sources": [{"source_id": n, "weight": 1.0 + k} for k, n in enumerate(NAMES)],
    }))
    return inbox, config, repeating


@pytest.mark.parametrize("seed", range(6))
def test_the_nights_label_matrix_from_item_codes_is_the_files_cells(tmp_path, seed):
    inbox, config_path, repeating = _write_night(tmp_path, seed)
    config = load_config(config_path)
    intake = ingest_batch(inbox, DATE, config)
    assert {s.source_id for s in intake.quarantined} == repeating
    assert all(any(e.rule == "duplicate_label" for e in s.errors) for s in intake.quarantined)
    for check in intake.valid_sources:
        assert check.labels.dtype == np.int8 and check.item_codes.dtype.kind == "i"
    matrix = analysis.prepare(intake.label_codes, intake.items.table, config)[0]

    # By hand, from the files: sources in string order, items by id, one cell per row.
    items = pq.read_table(inbox / BATCH / "items.parquet").to_pydict()
    ids, valid = sorted(items["item_id"]), sorted(set(NAMES) - repeating)
    cells = {}
    for name in valid:
        for path in sorted((inbox / BATCH / f"source_id={name}").glob("*.parquet")):
            table = pq.read_table(path).to_pydict()
            cells.update({(name, item): label for item, label in zip(table["item_id"], table["label"])})
    expected = np.zeros((len(valid), len(ids)), dtype=np.int8)
    seen = np.zeros_like(expected, dtype=bool)
    for (name, item), label in cells.items():
        expected[valid.index(name), ids.index(item)], seen[valid.index(name), ids.index(item)] = label, True
    assert list(matrix.source_ids) == valid and matrix.item_ids.tolist() == ids
    assert (matrix.labels == expected).all() and (matrix.labelled == seen).all()
    weight_of = dict(zip(items["item_id"], items["item_weight"]))
    assert matrix.item_weights.tolist() == [weight_of[i] for i in ids]
    # The long table (built on request) gives the same matrix through the string path.
    from_long = analysis.prepare(intake.labels, intake.items.table, config)[0]
    assert from_long.labels.tobytes() == matrix.labels.tobytes() and from_long.labelled.tobytes() == matrix.labelled.tobytes()
    assert from_long.global_costs().tobytes() == matrix.global_costs().tobytes()


def _two_file_source(root: Path, items_ok: bool = True, b_ids: list[str] | None = None) -> tuple[Path, Path]:
    inbox = root / "inbox"
    batch = inbox / BATCH
    folder = batch / "source_id=lab"
    folder.mkdir(parents=True)
    pq.write_table(pa.table({"item_id": ["w", "x", "y", "z"] if items_ok else ["w", "w"]}), batch / "items.parquet")
    pq.write_table(pa.table({"item_id": ["x", "y", "x", "z"], "label": [1, 0, 0, 1]}), folder / "a.parquet")
    b = b_ids or ["y", "w", "x"]
    pq.write_table(pa.table({"item_id": b, "label": [1] * len(b)}), folder / "b.parquet")
    return inbox, folder


def _source_errors(inbox: Path, folder: Path, item_ids) -> list[ErrorRecord]:
    return ingest.validate_source(inbox, folder, {"lab": 1.0}, item_ids).errors


A, B = f"{BATCH}/source_id=lab/a.parquet", f"{BATCH}/source_id=lab/b.parquet"
# By hand: a.parquet rows x, y, x, z; b.parquet rows y, w, x. Later repeats: a row 3 (x, first
# in a row 1), b row 1 (y, first in a row 2), b row 3 (x, first in a row 1).
REPEATS = [
    ErrorRecord(A, 3, "item_id", "duplicate_label", f"this source already labelled this item in {A} row 1"),
    ErrorRecord(B, 1, "item_id", "duplicate_label", f"this source already labelled this item in {A} row 2"),
    ErrorRecord(B, 3, "item_id", "duplicate_label", f"this source already labelled this item in {A} row 1"),
]


def test_duplicate_records_on_item_codes_name_file_row_and_first_place(tmp_path):
    inbox, folder = _two_file_source(tmp_path)
    errors = _source_errors(inbox, folder, pa.array(["w", "x", "y", "z"]))
    assert errors == REPEATS
    assert [e.code for e in errors] == ["lot_graded_twice"] * 3


def test_duplicate_records_without_a_valid_items_table_are_the_same(tmp_path):
    inbox, folder = _two_file_source(tmp_path, items_ok=False)
    assert _source_errors(inbox, folder, None) == REPEATS  # no codes: the ids' own keys


@pytest.mark.parametrize("items_ok", [True, False])
def test_more_than_twenty_repeats_in_a_file_are_counted_in_one_record(tmp_path, items_ok):
    # b.parquet: "w" then "x" 24 times; "x" is first in a row 1, so b rows 2..25 repeat it.
    inbox, folder = _two_file_source(tmp_path, items_ok, b_ids=["w"] + ["x"] * 24)
    errors = [e for e in _source_errors(inbox, folder, pa.array(["w", "x", "y", "z"]) if items_ok else None) if e.file == B]
    assert [e.row for e in errors] == list(range(2, 22)) + [None]
    assert errors[-1].message == "4 more rows break this rule"
    assert {e.message for e in errors[:-1]} == {f"this source already labelled this item in {A} row 1"}


def test_a_source_check_holds_arrays_and_builds_the_long_table_on_request(tmp_path):
    inbox, folder = _two_file_source(tmp_path, b_ids=["w"])
    pq.write_table(pa.table({"item_id": ["z", "x"], "label": [0, 1]}), folder / "a.parquet")
    check = ingest.validate_source(inbox, folder, {"lab": 1.0}, pa.array(["w", "x", "y", "z"]))
    # Files in name order (a, then b); codes are positions in the items table w, x, y, z.
    assert check.valid and check.labels.tolist() == [0, 1, 1] and check.item_codes.tolist() == [3, 1, 0]
    assert check.labels.dtype == np.int8 and check.codes.source_id == "lab"
    assert check.table.to_dict("list") == {"item_id": ["z", "x", "w"], "source_id": ["lab"] * 3, "label": [0, 1, 1]}


def test_without_a_valid_items_table_a_source_keeps_its_item_ids_through_the_work_area(tmp_path):
    inbox, folder = _two_file_source(tmp_path, items_ok=False, b_ids=["w"])
    pq.write_table(pa.table({"item_id": ["z", "x"], "label": [0, 1]}), folder / "a.parquet")
    check = ingest.validate_source(inbox, folder, {"lab": 1.0}, None)
    assert check.valid and check.item_codes is None and check.item_ids.to_pylist() == ["z", "x", "w"]
    store = LocalStore(inbox, tmp_path / "out")
    work_files.write_source(store, DATE, folder.name, check, None)
    back = work_files.read_source(store, DATE, folder.name, None)
    assert back.valid and back.item_codes is None
    assert back.item_ids.to_pylist() == ["z", "x", "w"] and back.labels.tolist() == [0, 1, 1]
    assert back.table["item_id"].tolist() == ["z", "x", "w"]


def test_no_module_of_the_command_lines_screening_path_imports_pandas():
    modules = ["truthsieve.pipeline.cli", "truthsieve.pipeline.night", "truthsieve.pipeline.screen", "truthsieve.pipeline.ingest",
               "truthsieve.pipeline.label_files", "truthsieve.pipeline.source_files", "truthsieve.pipeline.night_inputs",
               "truthsieve.pipeline.records", "truthsieve.pipeline.work_files",
               "truthsieve.pipeline.analysis", "truthsieve.core.labels", "truthsieve.core.rules", "truthsieve.core.threshold_rules"]
    code = f"import importlib, sys\nfor m in {modules!r}: importlib.import_module(m)\nprint('pandas' in sys.modules)"
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip() == "False"
