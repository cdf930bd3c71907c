"""One source's label files: the per-file checks and the duplicate check across its files.

Called by :func:`truthsieve.pipeline.ingest.validate_source`; every problem is an
:class:`~truthsieve.pipeline.records.ErrorRecord` naming file, row and column.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from truthsieve.core.labels import id_array
from truthsieve.pipeline.classes import BINARY, ClassAlphabet, decode_labels, label_type_error
from truthsieve.pipeline.records import MAX_ROWS_PER_RULE, ErrorRecord, row_errors

LABEL_COLUMNS = ("item_id", "label")
CONTROL_CHARACTERS = r"[\x00-\x1f\x7f]"


def is_string(kind: pa.DataType) -> bool:
    return pa.types.is_string(kind) or pa.types.is_large_string(kind)


def id_errors(relative_path: str, column: pa.ChunkedArray) -> list[ErrorRecord]:
    """Null ids and ids holding a NUL or other control character (``X`` and ``X\\x00`` look alike)."""
    control = pc.fill_null(pc.match_substring_regex(column, CONTROL_CHARACTERS), False)
    return row_errors(relative_path, np.flatnonzero(column.is_null().to_numpy(zero_copy_only=False)), "item_id", "null_item_id", "item_id is null") + row_errors(
        relative_path, np.flatnonzero(control.to_numpy(zero_copy_only=False)), "item_id", "control_character_in_id",
        "item_id holds a NUL or other control character",
    )


def duplicate_errors(frames: list[pd.DataFrame], places: list[str]) -> list[ErrorRecord]:
    """``duplicate_label`` for every later occurrence of an item, naming the first one's file and row."""
    every = pa.chunked_array([id_array(f["item_id"]) for f in frames], pa.string())
    if pc.count_distinct(every).as_py() == len(every):
        return []  # the common case, decided in Arrow without a Python string per row
    ids = np.concatenate([f["item_id"].to_numpy(dtype=object) for f in frames])
    codes, _ = pd.factorize(ids)
    _, first_of_code = np.unique(codes, return_index=True)
    first = first_of_code[codes]
    repeated = np.flatnonzero(first != np.arange(len(ids)))
    if not len(repeated):
        return []
    starts = np.cumsum([0] + [len(f) for f in frames])
    file_of = np.searchsorted(starts, np.arange(len(ids)), side="right") - 1
    errors = []
    for k in range(len(frames)):
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


def validate_labels(
    relative_path: str, table: pa.Table, item_ids: pa.Array | None, classes: ClassAlphabet = BINARY
) -> tuple[pd.DataFrame | None, list[ErrorRecord], np.ndarray | None]:
    """(labels frame, errors, each row's position in ``item_ids``): one hash join per file.

    Labels are decoded to class indices by :func:`~truthsieve.pipeline.classes.decode_labels`
    (indices, names or bool as ``classes`` allows); with the binary default the records are
    those of the two-class checks (``label must be 0 or 1``).
    """
    errors: list[ErrorRecord] = []
    schema = table.schema
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
    if errors:
        return None, errors, None

    errors += id_errors(relative_path, table.column("item_id"))
    # Ids stay in Arrow: joined by a hash join, never one Python string per row.
    ids = id_array(table.column("item_id"))
    labels, label_errors = decode_labels(relative_path, table.column("label"), classes)
    errors += label_errors
    found = None
    if item_ids is not None:
        joined = pc.index_in(ids, value_set=item_ids)
        unknown = pc.and_(ids.is_valid(), joined.is_null()).to_numpy(zero_copy_only=False)
        errors += row_errors(relative_path, np.flatnonzero(unknown), "item_id", "unknown_item", "item_id is not in the items table")
    if errors:
        return None, errors, None
    if item_ids is not None:
        found = joined.to_numpy(zero_copy_only=False)
    return pa.table({"item_id": ids, "label": labels}).to_pandas(), [], found
