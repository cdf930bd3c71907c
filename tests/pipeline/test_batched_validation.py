"""The command line's validation of a whole night (``ingest.validate_sources``: the item-id
joins of many files in one hash join, files placed under their folder's real path,
bool and int8 labels decoded without the general path) against the straight
computation: each folder validated on its own, one ``index_in`` per file, every path
resolved whole and every label column through ``decode_labels``, as ingest did before.

Random nights (fixed seeds) mix every kind of problem a source folder can hold: unknown,
null, control-character and repeated ids, nulls, wrong types and out-of-range labels,
extra and missing columns, empty and unreadable files, links inside and outside the
inbox, unregistered and misnamed sources, folders without label files.
"""

from __future__ import annotations

import os
from dataclasses import replace
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest

from truthsieve.core.ids import id_array
from truthsieve.pipeline import ingest, layout, night, source_files
from truthsieve.pipeline.classes import BINARY, ClassAlphabet, decode_labels
from truthsieve.pipeline.config import Config
from truthsieve.pipeline.label_files import FileLabels, duplicate_errors, fast_labels, id_errors, join_ids, schema_errors
from truthsieve.pipeline.records import ErrorRecord, FileCheck, InputFile, parse, row_errors
from truthsieve.pipeline.store import LocalStore

DATE = "2026-12-02"
BATCH = f"batch_date={DATE}"
GRADES = ClassAlphabet(("reject", "feed", "premium"))
UNDECODABLE = os.fsdecode(b"bad-\xff")  # a name that is not UTF-8: held as a surrogate escape


# ---- the straight computation (ingest before the batched path) ------------------------------
def _straight_scan(inbox: Path, folder: Path):
    files, refused, notes = [], [], []
    for entry in sorted(os.scandir(folder), key=lambda e: e.name):
        path, name = Path(entry.path), entry.name
        suffix = os.path.splitext(name)[1]
        if not layout.decodable(name):
            refused.append((path, "undecodable_name"))
        elif entry.is_symlink() and not Path(os.path.realpath(path)).is_relative_to(Path(os.path.realpath(inbox))):
            refused.append((path, "link_outside_inbox"))
        elif entry.is_dir():
            notes.append(layout.Note("stray_folder", layout.relative(path, inbox), layout.NOTE_CODES["stray_folder"]))
            continue
        elif suffix == layout.LABEL_SUFFIX:
            files.append(path)
            continue
        elif suffix.lower() in layout.DATA_SUFFIXES:
            refused.append((path, "misnamed_label_file"))
        else:
            notes.append(layout.Note("stray_file", layout.relative(path, inbox), layout.NOTE_CODES["stray_file"]))
            continue
        notes.append(layout.Note(refused[-1][1], layout.relative(path, inbox), layout.NOTE_CODES[refused[-1][1]]))
    return files, refused, notes


def _resolved_inside(path: Path, inbox: Path) -> bool:
    return Path(os.path.realpath(path)).is_relative_to(Path(os.path.realpath(inbox)))


def _straight_labels(name: str, table: pa.Table, item_ids, classes):
    """One file's checks as before: the schema, its own ``index_in``, ``decode_labels``."""
    errors = schema_errors(name, table.schema, classes)
    if errors:
        return None, errors
    ids = id_array(table.column("item_id"))
    joined = None if item_ids is None else pc.index_in(ids, value_set=item_ids, skip_nulls=True)
    if joined is None or joined.null_count:
        errors += id_errors(name, table.column("item_id"))
    labels, label_errors = decode_labels(name, table.column("label"), classes)
    errors += label_errors
    codes = None
    if joined is not None:
        unknown = pc.and_(ids.is_valid(), joined.is_null()).to_numpy(zero_copy_only=False)
        errors += row_errors(name, np.flatnonzero(unknown), "item_id", "unknown_item", "item_id is not in the items table")
        if not errors:
            codes = joined.to_numpy(zero_copy_only=False)
    if errors:
        return None, errors
    return FileLabels(labels, codes, ids), []


def straight_validate_source(inbox: Path, folder: Path, registry, item_ids, item_weights=None, classes=BINARY) -> FileCheck:
    item_ids = None if item_ids is None else id_array(item_ids)
    source_id = layout.display(folder.name.removeprefix(layout.SOURCE_PREFIX))
    folder_name = layout.relative(folder, inbox)
    check = FileCheck(source_id=source_id)
    if not _resolved_inside(folder, inbox):
        check.errors.append(ErrorRecord(folder_name, None, None, "link_outside_inbox", "the source folder is a link whose target lies outside the inbox; not read"))
        return check
    label_files, refused, notes = _straight_scan(inbox, folder)
    check.notes += notes
    for path, code in refused:
        check.errors.append(ErrorRecord(layout.relative(path, inbox), None, None, code, layout.NOTE_CODES[code]))
    contents = []
    for path in label_files:
        name = layout.relative(path, inbox)
        if not _resolved_inside(path, inbox):
            check.errors.append(ErrorRecord(name, None, None, "link_outside_inbox", "a link whose target lies outside the inbox; not read"))
            continue
        try:
            data = Path(os.path.realpath(path)).read_bytes()
        except OSError as error:
            check.errors.append(ErrorRecord(name, None, None, "unreadable_file", f"cannot read: {error.strerror}"))
            continue
        check.contents[name] = data
        contents.append((name, data))
        check.inputs.append(InputFile(name, layout.sha256(data), None, source_id, False))
    if not source_files.SOURCE_ID_RE.fullmatch(source_id):
        check.errors.append(ErrorRecord(folder_name, None, "source_id", "bad_source_id", f"source id must match {layout.SOURCE_ID_PATTERN}"))
        return check
    if source_id not in registry:
        check.errors.append(ErrorRecord(folder_name, None, "source_id", "unknown_source", f"source {source_id} is not in the registry"))
        return check
    if not label_files and not refused:
        check.errors.append(ErrorRecord(folder_name, None, None, "no_label_files", "the source folder holds no .parquet file"))
        return check
    files, places = [], []
    for index, (name, data) in enumerate(contents):
        table, error = parse(name, data)
        if table is not None:
            check.inputs[index] = replace(check.inputs[index], rows=table.num_rows)
        if error:
            check.errors.append(error)
            continue
        found, errors = _straight_labels(name, table, item_ids, classes)
        check.errors += errors
        if found is not None:
            files.append(found)
            places.append(name)
    if files:
        check.errors += duplicate_errors(files, places)
    codes = np.concatenate([f.codes for f in files]) if files and item_ids is not None else None
    if not check.errors and item_weights is not None and not item_weights[codes].sum() > 0:
        check.errors.append(ErrorRecord(folder_name, None, "item_weight", "no_positive_weight", "every item this source labelled has item_weight 0"))
    if not check.errors:
        check.labels = np.concatenate([f.labels for f in files])
        if item_ids is None:
            check.item_ids = pa.chunked_array([f.ids for f in files], pa.string()).combine_chunks()
        else:
            check.item_codes, check.id_table = codes, item_ids
        check.inputs = [replace(f, valid=True) for f in check.inputs]
        check.contents.clear()
    return check


# ---- random nights ---------------------------------------------------------------------------
def _label_column(rng, n: int, classes: ClassAlphabet, broken: bool) -> pa.Array:
    k = classes.count
    kind = rng.choice(["bool", "int8", "int64", "uint8", "names", "float"] if broken else (["bool", "int8", "int8", "int64"] if k == 2 else ["int8", "int16", "names"]))
    values = rng.integers(0, k, n)
    if broken and rng.random() < 0.5 and n:
        values[rng.integers(0, n)] = rng.choice([-1, k, 127])
    mask = (rng.random(n) < 0.1) if broken and rng.random() < 0.4 else None
    if kind == "bool":
        return pa.array(values.astype(bool) if k == 2 else values > 0, mask=mask)
    if kind == "names":
        names = classes.names or ("0", "1")
        return pa.array([names[v] if 0 <= v < len(names) else "nothing" for v in values], mask=mask)
    if kind == "float":
        return pa.array(values.astype(np.float64), mask=mask)
    dtype = {"int8": np.int8, "int16": np.int16, "int64": np.int64, "uint8": np.uint8}[kind]
    if kind == "uint8":
        values = np.abs(values)
    return pa.array(values.astype(dtype), mask=mask)


def _id_column(rng, ids: list[str], n: int, broken: bool) -> pa.Array:
    chosen = [ids[k] for k in rng.permutation(len(ids))[:n]]
    if broken:
        for _ in range(int(rng.integers(1, 4))):
            if not chosen:
                break
            at, what = int(rng.integers(0, len(chosen))), rng.choice(["unknown", "null", "control", "repeat"])
            chosen[at] = {"unknown": "not-an-item", "null": None, "control": chosen[at] and chosen[at] + "\x00", "repeat": chosen[0]}[what]
    return pa.array(chosen, pa.string())


def _write_night(root: Path, seed: int, classes: ClassAlphabet) -> tuple[Path, list[str], dict, pa.Array, np.ndarray]:
    rng = np.random.default_rng(seed)
    inbox = root / "inbox"
    batch = inbox / BATCH
    batch.mkdir(parents=True)
    outside = root / "outside.parquet"
    pq.write_table(pa.table({"item_id": ["x"], "label": [True]}), outside)
    n_items = int(rng.integers(1, 40))
    ids = [f"lot-{k:03d}" for k in rng.permutation(n_items)]
    weights = np.where(rng.random(n_items) < 0.2, 0.0, 1.0)
    folders, registry = [], {}
    for s in range(int(rng.integers(1, 9))):
        source = f"s{s}"
        if rng.random() < 0.85:
            registry[source] = 1.0
        name = f"source_id={source}" if rng.random() > 0.05 else f"source_id={source}!"
        folder = batch / name
        folder.mkdir()
        folders.append(name)
        for f in range(int(rng.integers(0, 4))):
            path = folder / f"part{f}.parquet"
            broken = rng.random() < 0.3
            trouble = rng.random()
            if broken and trouble < 0.08:
                path.write_bytes(b"not parquet")
            elif broken and trouble < 0.14:
                pq.write_table(pa.table({"item_id": pa.array([], pa.string()), "label": pa.array([], pa.bool_())}), path)
            elif broken and trouble < 0.2:
                os.symlink(outside, path)
            elif broken and trouble < 0.26:
                pq.write_table(pa.table({"item_id": ids[:1], "label": [True], "note": ["x"]}), path)
            elif broken and trouble < 0.3:
                pq.write_table(pa.table({"item": ids[:1], "label": [1]}), path)
            else:
                n = int(rng.integers(1, n_items + 1))
                pq.write_table(pa.table({"item_id": _id_column(rng, ids, n, broken), "label": _label_column(rng, n, classes, broken)}), path)
        if rng.random() < 0.1:
            os.symlink(next(iter(folder.glob("*.parquet")), outside), folder / "alias.parquet")  # a link inside (or leaving)
        if rng.random() < 0.05:
            (folder / "labels.csv").write_text("item_id,label\n")
    if rng.random() < 0.2:
        os.symlink(root, batch / "source_id=away")  # a folder link leaving the inbox
        folders.append("source_id=away")
        registry["away"] = 1.0
    return inbox, sorted(folders), registry, pa.array(ids), weights


def _same(batched: FileCheck, straight: FileCheck) -> None:
    assert batched.source_id == straight.source_id
    assert batched.errors == straight.errors
    assert batched.inputs == straight.inputs and batched.notes == straight.notes
    assert batched.contents == straight.contents and batched.valid == straight.valid
    for name in ("labels", "item_codes"):
        mine, theirs = getattr(batched, name), getattr(straight, name)
        assert (mine is None) == (theirs is None)
        if mine is not None:
            assert mine.dtype == theirs.dtype and mine.tobytes() == theirs.tobytes()
    if straight.item_ids is not None:
        assert batched.item_ids.equals(straight.item_ids)


@pytest.mark.parametrize("grouping", [(2, 1 << 16), (0, 1), (0, 7)])  # one group; one per source; a few per group
@pytest.mark.parametrize("classes", [BINARY, GRADES], ids=["binary", "grades"])
def test_a_whole_night_validated_in_groups_is_each_folder_validated_on_its_own(tmp_path, monkeypatch, grouping, classes):
    monkeypatch.setattr(source_files, "JOIN_ROWS_PER_ITEM", grouping[0])
    monkeypatch.setattr(source_files, "JOIN_MIN_ROWS", grouping[1])
    invalid_seen = valid_seen = 0
    for seed in range(25):
        inbox, folders, registry, ids, weights = _write_night(tmp_path / str(seed), seed, classes)
        batch = inbox / BATCH
        for item_ids, item_weights in ((ids, weights), (None, None)):
            batched = list(ingest.validate_sources(inbox, [batch / f for f in folders], registry, item_ids, item_weights, classes))
            assert len(batched) == len(folders)
            for folder, check in zip(folders, batched):
                _same(check, straight_validate_source(inbox, batch / folder, registry, item_ids, item_weights, classes))
                _same(ingest.validate_source(inbox, batch / folder, registry, item_ids, item_weights, classes), check)
                invalid_seen += not check.valid
                valid_seen += check.valid
    assert invalid_seen > 20 and valid_seen > 20  # both kinds were compared


def test_the_command_lines_step_writes_what_the_per_source_steps_write(tmp_path):
    inbox, folders, registry, ids, _ = _write_night(tmp_path, 3, BINARY)
    config = Config.model_validate({"rule_class": {"kind": "threshold", "features": ["f"]}, "mechanism": "tuned_dictator",
                                    "sources": [{"source_id": s, "weight": 1.0} for s in registry]})
    index = night.ItemIndex(ids, np.ones(len(ids)))
    written = {}
    for name, run in (("batched", lambda store: night.validate_sources(store, DATE, folders, config, index)),
                      ("each", lambda store: [night.validate_source(store, DATE, f, config, index) for f in folders])):
        store = LocalStore(inbox, tmp_path / f"out-{name}", run="t")
        run(store)
        work = store.work(DATE)
        written[name] = {str(p.relative_to(work)): p.read_bytes() for p in sorted(work.rglob("*")) if p.is_file()}
    assert written["batched"] == written["each"] and written["each"]


# ---- the pieces --------------------------------------------------------------------------------
def test_one_join_over_many_arrays_is_each_arrays_own_join():
    rng = np.random.default_rng(5)
    for _ in range(50):
        items = pa.array([f"i{k}" for k in rng.permutation(int(rng.integers(1, 30)))])
        arrays = [pa.array([f"i{v}" if v >= 0 else None for v in rng.integers(-2, 35, int(rng.integers(1, 20)))], pa.string())
                  for _ in range(int(rng.integers(1, 6)))]
        for mine, array in zip(join_ids(arrays, items), arrays):
            assert mine.equals(pc.index_in(array, value_set=items, skip_nulls=True))


@pytest.mark.parametrize("classes", [BINARY, GRADES, ClassAlphabet(tuple(f"c{k}" for k in range(200)))], ids=["K2", "K3", "K200"])
def test_the_fast_label_path_gives_decode_labels_indices_or_declines(classes):
    rng = np.random.default_rng(11)
    taken = 0
    for _ in range(300):
        n = int(rng.integers(1, 12))
        kind = rng.choice([pa.bool_(), pa.int8(), pa.int16(), pa.uint8()])
        values = rng.integers(0, min(classes.count, 127), n)
        if rng.random() < 0.3:
            values[rng.integers(0, n)] = rng.choice([-1, -2, classes.count, classes.count + 1, 126])
        mask = rng.random(n) < 0.1 if rng.random() < 0.3 else None
        array = pa.array(values > 0, mask=mask) if kind == pa.bool_() else pa.array(values, mask=mask).cast(kind, safe=False)
        column = pa.chunked_array([array[: n // 2], array[n // 2:]], array.type)
        fast = fast_labels(column, classes)
        indices, errors = decode_labels("f.parquet", column, classes)
        if fast is not None:
            taken += 1
            assert not errors and fast.dtype == indices.dtype and fast.tobytes() == indices.tobytes() and fast.flags.writeable
    assert taken > 30


def test_a_label_file_is_placed_under_its_folders_real_path_and_a_link_resolved_whole(tmp_path):
    real = tmp_path / "disk" / "inbox"
    folder = real / BATCH / "source_id=a"
    folder.mkdir(parents=True)
    os.symlink(real, tmp_path / "inbox")  # the inbox reached through a link
    (folder / "a.parquet").write_bytes(b"a")
    os.symlink("a.parquet", folder / "b.parquet")
    inbox = tmp_path / "inbox"
    entries = layout.scan_source(inbox, inbox / BATCH / "source_id=a")
    assert entries.real_files == [os.path.realpath(p) for p in entries.label_files] == [str(folder / "a.parquet")] * 2
    assert layout.real_child(inbox / BATCH / "source_id=a", os.path.realpath(inbox / BATCH)) == str(folder)
    assert layout.real_child(inbox / BATCH / "source_id=a" / "..", os.path.realpath(inbox / BATCH / "source_id=a")) == str(real / BATCH)


def test_within_compares_whole_components():
    assert layout.within("/data/inbox", "/data/inbox") and layout.within("/data/inbox/x", "/data/inbox")
    assert not layout.within("/data/inbox-old/x", "/data/inbox") and not layout.within("/data", "/data/inbox")
    assert layout.within("/data", "/")


def test_a_resolved_file_is_never_read_through_a_link(tmp_path):
    secret = tmp_path / "secret"
    secret.write_bytes(b"not yours")
    os.symlink(secret, tmp_path / "swapped")  # a file replaced by a link after it was resolved
    with pytest.raises(OSError):
        layout.read_real(str(tmp_path / "swapped"), str(tmp_path))
    assert layout.read_real(str(secret), os.path.realpath(tmp_path)) == b"not yours"


def test_relative_names_are_relative_to_as_posix(tmp_path):
    for root in (tmp_path / "inbox", Path("inbox"), Path("/"), Path(".")):
        for tail in ("a", "a/b.parquet", "a/../b", f"{BATCH}/source_id=x/{UNDECODABLE}.parquet"):
            path = root / tail
            assert layout.relative(path, root) == layout.display(path.relative_to(root).as_posix())
    with pytest.raises(ValueError):
        layout.relative(tmp_path / "elsewhere" / "a", tmp_path / "inbox")


def test_the_records_flat_dicts_are_asdicts():
    from dataclasses import asdict

    record = InputFile("a/b.parquet", "0" * 64, 3, "lab", True)
    note = layout.Note("stray_file", "a/x.txt", layout.NOTE_CODES["stray_file"])
    assert record.as_dict() == asdict(record) and list(record.as_dict()) == list(asdict(record))
    assert note.as_dict() == asdict(note) and list(note.as_dict()) == list(asdict(note))


@pytest.mark.parametrize("limit", [0, 1 << 40])  # every file read as large, or as small
def test_a_file_reads_the_same_on_one_thread_or_several(monkeypatch, limit):
    from truthsieve.pipeline import records

    rng = np.random.default_rng(2)
    table = pa.table({"item_id": [f"i{k}" for k in range(5000)], "label": pa.array(rng.random(5000) < 0.5)})
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink, row_group_size=700)
    data = sink.getvalue().to_pybytes()
    monkeypatch.setattr(records, "SMALL_FILE_BYTES", limit)
    read, error = parse("f.parquet", data)
    assert error is None and read.equals(table)


def _two_sources(inbox: Path) -> list[Path]:
    batch = inbox / "batch_date=2026-01-01"
    for s in ("a", "b"):
        (batch / f"source_id={s}").mkdir(parents=True)
        pq.write_table(pa.table({"item_id": ["i1", "i2"], "label": pa.array([0, 1], pa.int8())}), batch / f"source_id={s}" / "x.parquet")
    return [batch / "source_id=a", batch / "source_id=b"]


def test_a_batch_folder_swapped_for_a_link_leaving_the_inbox_mid_night_is_not_read(tmp_path):
    """The real paths are found once per night; a folder above a file turned into a link to
    outside after that must still be refused (the opened file itself is checked)."""
    inbox, outside = tmp_path / "inbox", tmp_path / "outside"
    outside.mkdir()
    folders = _two_sources(inbox)
    batch = folders[0].parent

    def feed():
        yield folders[0]
        os.rename(batch, outside / batch.name)  # the night's files now live outside, reached by a link
        os.symlink(outside / batch.name, batch)
        yield folders[1]

    first, second = ingest.validate_sources(inbox, feed(), {"a": 1, "b": 1}, pa.array(["i1", "i2"]))
    assert first.valid
    assert not second.valid and [e.code for e in second.errors] == ["link_outside_inbox"]
    assert second.inputs == [] and second.contents == {}


def test_a_source_folder_swapped_for_a_link_between_two_reads_is_not_read(tmp_path, monkeypatch):
    inbox, outside = tmp_path / "inbox", tmp_path / "outside"
    outside.mkdir()
    source = inbox / "batch_date=2026-01-01" / "source_id=a"
    source.mkdir(parents=True)
    for k in range(2):
        pq.write_table(pa.table({"item_id": [f"i{k}"], "label": pa.array([k], pa.int8())}), source / f"f{k}.parquet")
    from truthsieve.pipeline import records

    original, reads = records.read_real, []

    def read_then_swap(*arguments):  # stands in for a writer racing the night
        reads.append(arguments[0])
        data = original(*arguments)
        if len(reads) == 1:
            os.rename(source, outside / "a")
            os.symlink(outside / "a", source)
        return data

    monkeypatch.setattr(records, "read_real", read_then_swap)
    check = ingest.validate_source(inbox, source, {"a": 1}, pa.array(["i0", "i1"]))
    assert len(reads) == 2, "both files were opened by read_real"
    assert [(e.code, e.file) for e in check.errors] == [("link_outside_inbox", "batch_date=2026-01-01/source_id=a/f1.parquet")]
    assert not check.valid


def test_the_opened_files_location_is_the_kernels_record(tmp_path):
    inside = tmp_path / "inbox" / "x"
    inside.parent.mkdir()
    inside.write_bytes(b"1")
    fd = os.open(inside, os.O_RDONLY)
    try:
        assert layout.opened_location(fd, str(inside)) == os.path.realpath(inside)
    finally:
        os.close(fd)
    assert layout.read_real(os.path.realpath(inside), os.path.realpath(inside.parent)) == b"1"
    with pytest.raises(PermissionError):
        layout.read_real(os.path.realpath(inside), os.path.realpath(tmp_path / "elsewhere"))


def test_a_file_that_cannot_be_opened_is_unreadable_not_a_link(tmp_path, monkeypatch):
    """EACCES (a mode-000 file for a non-root user; these tests may run as root, so the
    refusal is simulated at the one call that opens label files)."""
    from truthsieve.pipeline import records

    folders = _two_sources(tmp_path / "inbox")

    def refused(real, real_inbox):
        raise PermissionError(13, "Permission denied", real)

    monkeypatch.setattr(records, "read_real", refused)
    check = ingest.validate_source(tmp_path / "inbox", folders[0], {"a": 1}, pa.array(["i1", "i2"]))
    assert [(e.rule, e.message) for e in check.errors] == [("unreadable_file", "cannot read: Permission denied")]
