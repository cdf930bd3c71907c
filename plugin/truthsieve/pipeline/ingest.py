"""Read and validate one night's inbox: the items table and each source's label files.

Layout (the contract)::

    <inbox>/batch_date=YYYY-MM-DD/items.parquet
    <inbox>/batch_date=YYYY-MM-DD/source_id=<id>/<any>.parquet

Every problem becomes an :class:`ErrorRecord` naming the file (relative to the inbox),
the row (1 = first row; None when the problem is not about one row), the column and
the rule broken. Files are read once, as bytes, so the recorded sha256 is the hash of
exactly what was parsed. Nothing here writes, moves or deletes anything.
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Iterable, Mapping
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from truthsieve.core.rules import RULE_COLUMN_PREFIX

SOURCE_ID_RE = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,63}")
ITEMS_FILE = "items.parquet"
LABEL_COLUMNS = ("item_id", "label")
# Enough rows per (file, rule) to find the pattern; the rest are counted in one record.
MAX_ROWS_PER_RULE = 20


@dataclass(frozen=True)
class ErrorRecord:
    file: str
    row: int | None
    column: str | None
    rule: str
    message: str

    def as_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class InputFile:
    path: str  # relative to the inbox, POSIX separators
    sha256: str
    rows: int | None
    source_id: str | None
    valid: bool


@dataclass
class FileCheck:
    """The outcome of validating one group of files (the items table, or one source)."""

    source_id: str | None
    table: pd.DataFrame | None
    inputs: list[InputFile] = field(default_factory=list)
    errors: list[ErrorRecord] = field(default_factory=list)

    @property
    def valid(self) -> bool:
        return self.table is not None and not self.errors

    def summary(self) -> dict:
        """Everything but the table, as JSON-ready data (the table travels as Parquet)."""
        return {
            "source_id": self.source_id,
            "inputs": [asdict(f) for f in self.inputs],
            "errors": [e.as_dict() for e in self.errors],
        }

    @classmethod
    def from_summary(cls, summary: dict, table: pd.DataFrame | None) -> "FileCheck":
        return cls(
            source_id=summary["source_id"],
            table=table,
            inputs=[InputFile(**f) for f in summary["inputs"]],
            errors=[ErrorRecord(**e) for e in summary["errors"]],
        )


def batch_folder(inbox: str | Path, batch_date: str) -> Path:
    return Path(inbox) / f"batch_date={batch_date}"


def _read(path: Path, inbox: Path) -> tuple[str, bytes | None, ErrorRecord | None]:
    relative = path.relative_to(inbox).as_posix()
    try:
        data = path.read_bytes()
    except OSError as error:
        return relative, None, ErrorRecord(relative, None, None, "unreadable_file", f"cannot read: {error.strerror}")
    return relative, data, None


def _parse(relative: str, data: bytes) -> tuple[pa.Table | None, ErrorRecord | None]:
    try:
        table = pq.read_table(pa.BufferReader(data))
    except (pa.ArrowException, OSError, ValueError) as error:
        return None, ErrorRecord(relative, None, None, "unreadable_parquet", f"not a readable Parquet file: {error}")
    if table.num_rows == 0:
        return None, ErrorRecord(relative, None, None, "empty_file", "the file has no rows")
    return table, None


def _row_errors(relative: str, rows: np.ndarray, column: str, rule: str, message: str) -> list[ErrorRecord]:
    records = [ErrorRecord(relative, int(r) + 1, column, rule, message) for r in rows[:MAX_ROWS_PER_RULE]]
    if len(rows) > MAX_ROWS_PER_RULE:
        records.append(
            ErrorRecord(relative, None, column, rule, f"{len(rows) - MAX_ROWS_PER_RULE} more rows break this rule")
        )
    return records


def _is_string(kind: pa.DataType) -> bool:
    return pa.types.is_string(kind) or pa.types.is_large_string(kind)


def _is_number(kind: pa.DataType) -> bool:
    return pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind)


def validate_items(inbox: str | Path, batch_date: str, features: Iterable[str] = (), listed: bool = False) -> FileCheck:
    """Validate ``items.parquet``: unique non-null string ids, finite numeric features,
    non-negative finite ``item_weight``, boolean ``rule__*`` columns."""
    inbox = Path(inbox)
    path = batch_folder(inbox, batch_date) / ITEMS_FILE
    check = FileCheck(source_id=None, table=None)
    if not path.is_file():
        relative = path.relative_to(inbox).as_posix()
        check.errors.append(ErrorRecord(relative, None, None, "missing_file", "the batch has no items table"))
        return check
    relative, data, error = _read(path, inbox)
    if error:
        check.errors.append(error)
        return check
    table, error = _parse(relative, data)
    check.inputs.append(
        InputFile(relative, hashlib.sha256(data).hexdigest(), table.num_rows if table else None, None, False)
    )
    if error:
        check.errors.append(error)
        return check

    errors = check.errors
    schema = table.schema
    if "item_id" not in schema.names:
        errors.append(ErrorRecord(relative, None, "item_id", "missing_column", "required column item_id is missing"))
    elif not _is_string(schema.field("item_id").type):
        errors.append(ErrorRecord(relative, None, "item_id", "wrong_type", f"item_id must be string, not {schema.field('item_id').type}"))
    for name in features:
        if name not in schema.names:
            errors.append(ErrorRecord(relative, None, name, "missing_column", f"configured feature {name} is missing"))
    for name in schema.names:
        kind = schema.field(name).type
        if name == "item_id":
            continue
        if name.startswith(RULE_COLUMN_PREFIX):
            if not pa.types.is_boolean(kind):
                errors.append(ErrorRecord(relative, None, name, "wrong_type", f"rule column must be bool, not {kind}"))
        elif not _is_number(kind):
            errors.append(ErrorRecord(relative, None, name, "wrong_type", f"feature columns must be numeric, not {kind}"))
    if listed and not any(n.startswith(RULE_COLUMN_PREFIX) for n in schema.names):
        errors.append(ErrorRecord(relative, None, None, "missing_column", f"the listed rule class needs {RULE_COLUMN_PREFIX}* columns"))
    if errors:
        return check

    frame = table.to_pandas()
    ids = frame["item_id"]
    errors += _row_errors(relative, np.flatnonzero(ids.isna().to_numpy()), "item_id", "null_item_id", "item_id is null")
    errors += _row_errors(
        relative, np.flatnonzero(ids.duplicated(keep="first").to_numpy() & ids.notna().to_numpy()),
        "item_id", "duplicate_item_id", "item_id appears on an earlier row",
    )
    for name in features:
        values = frame[name].to_numpy(dtype=np.float64, na_value=np.nan)
        errors += _row_errors(relative, np.flatnonzero(~np.isfinite(values)), name, "non_finite_feature", "feature is NaN, infinite or null")
    if "item_weight" in frame.columns:
        weights = frame["item_weight"].to_numpy(dtype=np.float64, na_value=np.nan)
        errors += _row_errors(relative, np.flatnonzero(~np.isfinite(weights)), "item_weight", "non_finite_weight", "item_weight is NaN, infinite or null")
        errors += _row_errors(relative, np.flatnonzero(weights < 0), "item_weight", "negative_item_weight", "item_weight is negative")
    for name in frame.columns:
        if name.startswith(RULE_COLUMN_PREFIX):
            errors += _row_errors(relative, np.flatnonzero(frame[name].isna().to_numpy()), name, "null_rule_value", "rule value is null")
    if not errors:
        check.table = frame
        check.inputs[0] = replace(check.inputs[0], valid=True)
    return check


def source_folders(inbox: str | Path, batch_date: str) -> list[Path]:
    """The ``source_id=*`` folders of a batch, sorted by name."""
    folder = batch_folder(inbox, batch_date)
    return sorted(p for p in folder.glob("source_id=*") if p.is_dir())


def validate_source(
    inbox: str | Path, folder: str | Path, registry: Mapping[str, object], item_ids: pd.Index | None
) -> FileCheck:
    """Validate every Parquet file of one source folder.

    A source is valid only when all its files are; its labels are returned as the long
    table (``item_id``, ``source_id``, ``label``) with labels as int8 0/1.
    """
    inbox, folder = Path(inbox), Path(folder)
    source_id = folder.name.removeprefix("source_id=")
    folder_relative = folder.relative_to(inbox).as_posix()
    check = FileCheck(source_id=source_id, table=None)
    files = sorted(folder.glob("*.parquet"))
    contents = []
    for path in files:
        relative, data, error = _read(path, inbox)
        if error:
            check.errors.append(error)
            continue
        contents.append((relative, data))
        check.inputs.append(InputFile(relative, hashlib.sha256(data).hexdigest(), None, source_id, False))
    if not SOURCE_ID_RE.fullmatch(source_id):
        check.errors.append(ErrorRecord(folder_relative, None, "source_id", "bad_source_id", "source id must match [A-Za-z0-9][A-Za-z0-9_.-]{0,63}"))
        return check
    if source_id not in registry:
        check.errors.append(ErrorRecord(folder_relative, None, "source_id", "unknown_source", f"source {source_id} is not in the registry"))
        return check
    if not files:
        check.errors.append(ErrorRecord(folder_relative, None, None, "no_label_files", "the source folder holds no .parquet file"))
        return check

    frames = []
    seen = pd.Index([], dtype=object)
    for index, (relative, data) in enumerate(contents):
        table, error = _parse(relative, data)
        if table is not None:
            check.inputs[index] = replace(check.inputs[index], rows=table.num_rows)
        if error:
            check.errors.append(error)
            continue
        frame, errors = _validate_labels(relative, table, item_ids, seen)
        check.errors += errors
        if frame is not None:
            frames.append(frame)
            seen = seen.append(pd.Index(frame["item_id"].to_numpy(), dtype=object))
    if not check.errors:
        labels = pd.concat(frames, ignore_index=True)
        labels.insert(1, "source_id", source_id)
        check.table = labels
        check.inputs = [replace(f, valid=True) for f in check.inputs]
    return check


def _validate_labels(
    relative: str, table: pa.Table, item_ids: pd.Index | None, seen: pd.Index
) -> tuple[pd.DataFrame | None, list[ErrorRecord]]:
    errors: list[ErrorRecord] = []
    schema = table.schema
    for name in LABEL_COLUMNS:
        if name not in schema.names:
            errors.append(ErrorRecord(relative, None, name, "missing_column", f"required column {name} is missing"))
    for name in schema.names:
        if name not in LABEL_COLUMNS:
            errors.append(ErrorRecord(relative, None, name, "extra_column", f"unexpected column {name}; label files hold item_id and label only"))
    if "item_id" in schema.names and not _is_string(schema.field("item_id").type):
        errors.append(ErrorRecord(relative, None, "item_id", "wrong_type", f"item_id must be string, not {schema.field('item_id').type}"))
    if "label" in schema.names:
        kind = schema.field("label").type
        if not (pa.types.is_boolean(kind) or pa.types.is_integer(kind)):
            errors.append(ErrorRecord(relative, None, "label", "wrong_type", f"label must be bool or integer 0/1, not {kind}"))
    if errors:
        return None, errors

    # Plain object arrays: pandas' Arrow-backed strings hash element by element in Python.
    ids = pd.Series(table.column("item_id").to_numpy(zero_copy_only=False), dtype=object)
    raw = pd.Series(table.column("label").to_numpy(zero_copy_only=False))
    errors += _row_errors(relative, np.flatnonzero(ids.isna().to_numpy()), "item_id", "null_item_id", "item_id is null")
    errors += _row_errors(relative, np.flatnonzero(raw.isna().to_numpy()), "label", "null_label", "label is null")
    numeric = raw.astype("float64")
    errors += _row_errors(
        relative, np.flatnonzero(raw.notna().to_numpy() & ~numeric.isin([0.0, 1.0]).to_numpy()),
        "label", "label_out_of_range", "label must be 0 or 1",
    )
    repeated = ids.duplicated(keep="first").to_numpy()
    if len(seen):
        repeated |= ids.isin(seen).to_numpy()
    errors += _row_errors(relative, np.flatnonzero(repeated & ids.notna().to_numpy()), "item_id", "duplicate_label", "this source already labelled this item")
    if item_ids is not None:
        unknown = ids.notna().to_numpy() & (item_ids.get_indexer(ids.fillna("").to_numpy()) < 0)
        errors += _row_errors(relative, np.flatnonzero(unknown), "item_id", "unknown_item", "item_id is not in the items table")
    if errors:
        return None, errors
    return pd.DataFrame({"item_id": ids.to_numpy(), "label": numeric.to_numpy().astype(np.int8)}), []
