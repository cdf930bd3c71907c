"""One source's label files: the per-file checks and the duplicate check across its files.

Called by :func:`truthsieve.pipeline.ingest.validate_source`; every problem is an
:class:`~truthsieve.pipeline.records.ErrorRecord` naming file, row and column.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from truthsieve.core.ids import id_array
from truthsieve.pipeline.classes import BINARY, ClassAlphabet, decode_labels, label_type_error
from truthsieve.pipeline.records import MAX_ROWS_PER_RULE, ErrorRecord, row_errors

LABEL_COLUMNS = ("item_id", "label")
CONTROL_CHARACTERS = r"[\x00-\x1f\x7f]"


def is_string(kind: pa.DataType) -> bool:
    return pa.types.is_string(kind) or pa.types.is_large_string(kind)


def id_errors(relative_path: str, column: pa.ChunkedArray) -> list[ErrorRecord]:
    """Null ids and ids holding a NUL or other control character (``X`` and ``X\\x00`` look alike)."""
    # Kleene "and" with validity turns the nulls of null ids into False without a Python
    # scalar (fill_null(..., False) builds one, and pyarrow imports pandas to build it).
    control = pc.and_kleene(pc.match_substring_regex(column, CONTROL_CHARACTERS), column.is_valid())
    return row_errors(relative_path, np.flatnonzero(column.is_null().to_numpy(zero_copy_only=False)), "item_id", "null_item_id", "item_id is null") + row_errors(
        relative_path, np.flatnonzero(control.to_numpy(zero_copy_only=False)), "item_id", "control_character_in_id",
        "item_id holds a NUL or other control character",
    )


class FileLabels(NamedTuple):
    """One valid label file as arrays: class indices, and each row's item as its position in
    the items table (``codes``) or, without a valid items table, as its id (``ids``)."""

    labels: np.ndarray
    codes: np.ndarray | None
    ids: pa.Array


def item_keys(files: list[FileLabels]) -> np.ndarray:
    """One integer per row of the files, equal exactly where the item is: the items table's
    codes, or, without them, the ids' dictionary indices (one hash pass in Arrow)."""
    if all(f.codes is not None for f in files):
        return np.concatenate([f.codes for f in files]).astype(np.int64, copy=False)
    every = pa.chunked_array([f.ids for f in files], pa.string()).combine_chunks()
    return pc.dictionary_encode(every).indices.to_numpy(zero_copy_only=False).astype(np.int64)


def duplicate_errors(files: list[FileLabels], places: list[str]) -> list[ErrorRecord]:
    """``duplicate_label`` for every later occurrence of an item, naming the first one's file and row."""
    keys = item_keys(files)
    if not len(keys) or np.bincount(keys).max() <= 1:
        return []  # the common case: one counting pass over the integer keys
    _, first_of_key, inverse = np.unique(keys, return_index=True, return_inverse=True)
    first = first_of_key[inverse.reshape(-1)]
    repeated = np.flatnonzero(first != np.arange(len(keys)))
    starts = np.cumsum([0] + [len(f.labels) for f in files])
    file_of = np.searchsorted(starts, np.arange(len(keys)), side="right") - 1
    errors = []
    for k in range(len(files)):
        rows = repeated[file_of[repeated] == k]
        for position in rows[:MAX_ROWS_PER_RULE]:
            earlier = first[position]
            where = places[file_of[earlier]]
            errors.append(ErrorRecord(
                places[k], int(position - starts[k]) + 1, "item_id", "duplicate_label",
                f"this source already labelled this item in {where} row {int(earlier - starts[file_of[earlier]]) + 1}",
            ))
        if len(rows) > MAX_ROWS_PER_RULE:
            errors.append(ErrorRecord(places[k], None, "item_id", "duplicate_label", f"{len(rows) - MAX_ROWS_PER_RULE} more rows break this rule"))
    return errors


def schema_errors(relative_path: str, schema: pa.Schema, classes: ClassAlphabet = BINARY) -> list[ErrorRecord]:
    """The file-level records of a label file's columns (missing, extra, wrong type)."""
    errors: list[ErrorRecord] = []
    for name in LABEL_COLUMNS:
        if name not in schema.names:
            errors.append(ErrorRecord(relative_path, None, name, "missing_column", f"required column {name} is missing"))
    for name in schema.names:
        if name not in LABEL_COLUMNS:
            errors.append(ErrorRecord(relative_path, None, name, "extra_column", f"unexpected column {name}; label files hold item_id and label only"))
    if "item_id" in schema.names and not is_string(schema.field("item_id").type):
        errors.append(ErrorRecord(relative_path, None, "item_id", "wrong_type", f"item_id must be string, not {schema.field('item_id').type}"))
    if "label" in schema.names:
        wrong = label_type_error(relative_path, schema.field("label").type, classes)
        errors += [wrong] if wrong else []
    return errors


def join_ids(ids: list[pa.Array], item_ids: pa.Array) -> list[pa.Array]:
    """Each array's rows as positions in ``item_ids`` (null where not found; a null id is
    never found), by one hash join over all of them: the items' hash table is built once."""
    if len(ids) == 1:
        return [pc.index_in(ids[0], value_set=item_ids, skip_nulls=True)]
    joined = pc.index_in(pa.chunked_array(ids, pa.string()), value_set=item_ids, skip_nulls=True).combine_chunks()
    starts = np.cumsum([0] + [len(a) for a in ids])
    return [joined.slice(int(starts[k]), len(ids[k])) for k in range(len(ids))]


def fast_labels(column: pa.ChunkedArray, classes: ClassAlphabet) -> np.ndarray | None:
    """The class indices of a label column without nulls that holds bool (K = 2) or int8
    indices all in ``0..K-1``, as :func:`decode_labels` gives them; None for anything else
    (then ``decode_labels`` decides, and writes the records)."""
    kind = column.type
    if column.null_count or not (pa.types.is_int8(kind) or (pa.types.is_boolean(kind) and classes.count == 2)):
        return None
    values = column.to_numpy()  # NumPy bool (False = 0, True = 1: always a class when K = 2) or int8
    if values.dtype == np.bool_:
        values = values.view(np.int8)
    elif len(values) and (values.min() < 0 or values.max() >= classes.count):
        return None
    return values.astype(classes.index_type)  # a copy, writable, as decode_labels gives


def validate_labels(
    relative_path: str, table: pa.Table, item_ids: pa.Array | None, classes: ClassAlphabet = BINARY
) -> tuple[FileLabels | None, list[ErrorRecord]]:
    """(the file's labels as arrays, errors): one hash join per file, no table built.

    The labels are None when there are errors; their ``codes`` are each row's position in
    ``item_ids`` (None when ``item_ids`` is None: the items table is invalid).

    Labels are decoded to class indices by :func:`~truthsieve.pipeline.classes.decode_labels`
    (indices, names or bool as ``classes`` allows); with the binary default the records are
    those of the two-class checks (``label must be 0 or 1``).
    """
    errors = schema_errors(relative_path, table.schema, classes)
    if errors:
        return None, errors
    ids = id_array(table.column("item_id"))
    joined = None if item_ids is None else join_ids([ids], item_ids)[0]
    return checked_labels(relative_path, table, ids, joined, classes)


def checked_labels(
    relative_path: str, table: pa.Table, ids: pa.Array, joined: pa.Array | None, classes: ClassAlphabet = BINARY
) -> tuple[FileLabels | None, list[ErrorRecord]]:
    """:func:`validate_labels` after the schema checks and the join: ``ids`` are the file's
    item ids (:func:`~truthsieve.core.ids.id_array`), ``joined`` their positions in the
    items table (:func:`join_ids`; None without a valid items table)."""
    errors: list[ErrorRecord] = []
    # Ids stay in Arrow: joined by a hash join, never one Python string per row.
    if joined is None or joined.null_count:
        errors += id_errors(relative_path, table.column("item_id"))
    # else every id is one of the items table's, which were checked: none is null or holds
    # a control character, so those checks would find nothing
    labels = fast_labels(table.column("label"), classes)
    if labels is None:
        labels, label_errors = decode_labels(relative_path, table.column("label"), classes)
        errors += label_errors
    codes = None
    if joined is not None:
        if joined.null_count:  # else every id was found
            unknown = pc.and_(ids.is_valid(), joined.is_null()).to_numpy(zero_copy_only=False)
            errors += row_errors(relative_path, np.flatnonzero(unknown), "item_id", "unknown_item", "item_id is not in the items table")
        if not errors:
            codes = joined.to_numpy(zero_copy_only=False)
    if errors:
        return None, errors
    return FileLabels(labels, codes, ids), []
