"""One source folder's validation: its label files read, parsed and checked.

Called through :mod:`truthsieve.pipeline.ingest` (which re-exports both functions); the
per-file checks are :mod:`truthsieve.pipeline.label_files`'. Files are read once, as
bytes, through their resolved path and only when that lies inside the inbox (the inbox's
and each batch folder's real path are resolved once; a file that is no link is placed
under its folder's real path without resolving it again, and opened without following a
link). Nothing here writes, moves or deletes anything.

Several sources validated in one process (:func:`validate_sources`, the command line)
have their item ids joined to the items table in groups: one hash join builds the items'
hash table once for many files, where one join per file would build it for every file.
The records and the arrays are those of :func:`validate_source`, one folder at a time.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pyarrow as pa

from truthsieve.core.ids import id_array
from truthsieve.pipeline import layout
from truthsieve.pipeline.classes import BINARY, ClassAlphabet
from truthsieve.pipeline.label_files import checked_labels, duplicate_errors, join_ids, schema_errors
from truthsieve.pipeline.layout import display, relative, sha256
from truthsieve.pipeline.records import ErrorRecord, FileCheck, InputFile, parse

SOURCE_ID_RE = re.compile(layout.SOURCE_ID_PATTERN)


def validate_source(
    inbox: str | Path,
    folder: str | Path,
    registry: Mapping[str, object],
    item_ids: pa.Array | None,
    item_weights: np.ndarray | None = None,
    classes: ClassAlphabet = BINARY,
) -> FileCheck:
    """Validate every Parquet file of one source folder.

    A source is valid only when all its files are; its labels are returned as arrays
    (:class:`~truthsieve.pipeline.records.FileCheck`: class indices, int8 or int16 when K >
    127, decoded as ``classes`` allows (:mod:`truthsieve.pipeline.classes`), and each
    label's position in the items table, or its item id when ``item_ids`` is None). An item
    labelled twice, in one file or across two, is a ``duplicate_label`` naming both places.

    :param item_ids: the items table's ids (any form :func:`~truthsieve.core.ids.id_array`
        takes; pass an Arrow array to avoid converting it per source).
    :param item_weights: the items' weights aligned with ``item_ids``; when given, a
        source whose labelled items all weigh 0 is an error (``no_positive_weight``).
    :param classes: the configuration's class alphabet (``config.class_alphabet``).
    """
    return next(validate_sources(inbox, [folder], registry, item_ids, item_weights, classes))


#: Sources are read until they hold this many labels per item of the items table (and at
#: least ``JOIN_MIN_ROWS``), then their ids are joined to the items table in one hash join:
#: its hash table is built once per group, not once per file.
JOIN_ROWS_PER_ITEM, JOIN_MIN_ROWS = 2, 1 << 16


def validate_sources(
    inbox: str | Path,
    folders: Iterable[str | Path],
    registry: Mapping[str, object],
    item_ids: pa.Array | None,
    item_weights: np.ndarray | None = None,
    classes: ClassAlphabet = BINARY,
) -> Iterator[FileCheck]:
    """:func:`validate_source` of each folder, in order, the same checks and records; the
    folders' item ids are joined to the items table in groups (see ``JOIN_ROWS_PER_ITEM``)."""
    inbox = Path(inbox)
    item_ids = None if item_ids is None else id_array(item_ids)
    real_inbox, real_parents = os.path.realpath(inbox), {}
    group_rows = 0 if item_ids is None else max(JOIN_ROWS_PER_ITEM * len(item_ids), JOIN_MIN_ROWS)
    group: list[_Opened] = []
    rows = 0
    for folder in map(Path, folders):
        if folder.parent not in real_parents:
            real_parents[folder.parent] = os.path.realpath(folder.parent)
        group.append(_open_source(inbox, folder, registry, classes, real_inbox, layout.real_child(folder, real_parents[folder.parent])))
        rows += group[-1].rows
        if rows >= group_rows:
            yield from _finish(group, item_ids, item_weights, classes)
            group, rows = [], 0
    yield from _finish(group, item_ids, item_weights, classes)


@dataclass
class _Opened:
    """One source folder read: its check so far and each label file parsed, with the
    records found before the join (``unreadable_parquet``, ``empty_file``, the columns')."""

    check: FileCheck
    folder_name: str
    files: list[tuple[str, pa.Table | None, list[ErrorRecord]]] = field(default_factory=list)
    done: bool = True  # nothing is left to check

    @property
    def rows(self) -> int:
        return sum(t.num_rows for _, t, e in self.files if t is not None and not e)


def _open_source(inbox: Path, folder: Path, registry: Mapping[str, object], classes: ClassAlphabet, real_inbox: str, real_folder: str) -> _Opened:
    source_id = display(folder.name.removeprefix(layout.SOURCE_PREFIX))
    folder_name = relative(folder, inbox)
    opened = _Opened(FileCheck(source_id=source_id), folder_name)
    check = opened.check
    if not layout.within(real_folder, real_inbox):
        check.errors.append(ErrorRecord(folder_name, None, None, "link_outside_inbox", "the source folder is a link whose target lies outside the inbox; not read"))
        return opened
    entries = layout.scan_source(inbox, folder, real_folder, real_inbox)
    check.notes += entries.notes
    for path, code in entries.refused:
        check.errors.append(ErrorRecord(relative(path, inbox), None, None, code, layout.NOTE_CODES[code]))
    contents = []
    for path, real in zip(entries.label_files, entries.real_files):
        name, data = check._read(path, inbox, real, real_inbox)
        if data is not None:
            contents.append((name, data))
            check.inputs.append(InputFile(name, sha256(data), None, source_id, False))
    if not SOURCE_ID_RE.fullmatch(source_id):
        check.errors.append(ErrorRecord(folder_name, None, "source_id", "bad_source_id", f"source id must match {layout.SOURCE_ID_PATTERN}"))
        return opened
    if source_id not in registry:
        check.errors.append(ErrorRecord(folder_name, None, "source_id", "unknown_source", f"source {source_id} is not in the registry"))
        return opened
    if not entries.label_files and not entries.refused:
        check.errors.append(ErrorRecord(folder_name, None, None, "no_label_files", "the source folder holds no .parquet file"))
        return opened
    for index, (name, data) in enumerate(contents):
        table, error = parse(name, data)
        if table is not None:
            check.inputs[index] = replace(check.inputs[index], rows=table.num_rows)
        opened.files.append((name, table, [error] if error else schema_errors(name, table.schema, classes)))
    opened.done = False
    return opened


def _finish(group: list[_Opened], item_ids: pa.Array | None, item_weights: np.ndarray | None, classes: ClassAlphabet) -> Iterator[FileCheck]:
    """The group's checks, done: one join of every file's ids, then each file's row checks."""
    ids = [id_array(t.column("item_id")) for o in group for _, t, e in o.files if t is not None and not e]
    joins = iter([None] * len(ids) if item_ids is None or not ids else join_ids(ids, item_ids))
    file_ids = iter(ids)
    for opened in group:
        check = opened.check
        if opened.done:
            yield check
            continue
        files, places = [], []
        for name, table, errors in opened.files:
            if table is not None and not errors:
                found, errors = checked_labels(name, table, next(file_ids), next(joins), classes)
                if found is not None:
                    files.append(found)
                    places.append(name)
            check.errors += errors
        yield _source_done(check, opened.folder_name, files, places, item_ids, item_weights)


def _source_done(check: FileCheck, folder_name: str, files: list, places: list[str], item_ids: pa.Array | None, item_weights: np.ndarray | None) -> FileCheck:
    if files:
        check.errors += duplicate_errors(files, places)
    codes = np.concatenate([f.codes for f in files]) if files and item_ids is not None else None
    if not check.errors and item_weights is not None:
        if not item_weights[codes].sum() > 0:
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
