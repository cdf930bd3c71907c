"""What validation found: error records, input files, and one check's outcome.

Shared by :mod:`truthsieve.pipeline.ingest` and the Airflow tasks, which send a check's
:meth:`FileCheck.summary` between processes and rebuild it with :meth:`FileCheck.from_summary`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from truthsieve.core.labels import SourceCodes
from truthsieve.pipeline.layout import LeavesInbox, Note, read_inside, read_real, relative, sha256

if TYPE_CHECKING:
    import pandas as pd

# Enough rows per (file, rule) to find the pattern; the rest are counted in one record.
MAX_ROWS_PER_RULE = 20

# truthsieve's own names of what validation found (``code``), from the former codes, which
# every record still carries as ``rule`` for one release (the contract: extend, never drop).
# Codes not listed keep their name (it already says what the entry is).
CODE_OF_FORMER = {
    "missing_column": "table_lacks_column",
    "extra_column": "file_holds_unlisted_column",
    "wrong_type": "column_holds_other_type",
    "duplicate_label": "lot_graded_twice",
    "empty_file": "file_holds_no_rows",
    "unreadable_parquet": "file_is_not_parquet",
    "unreadable_file": "file_cannot_be_read",
    "missing_file": "batch_lacks_items_table",
    "duplicate_item_id": "lot_listed_twice",
    "null_item_id": "lot_id_blank",
    "null_label": "grade_blank",
    "label_out_of_range": "grade_not_0_or_1",
    "unknown_item": "lot_not_in_items_table",
    "configured_column_missing": "table_lacks_feature",
    "non_finite_feature": "feature_not_a_number",
    "feature_out_of_range": "feature_beyond_limit",
    "null_rule_value": "rule_value_blank",
    "no_label_files": "folder_holds_no_labels",
    "unknown_source": "source_not_in_registry",
    "bad_source_id": "source_name_not_allowed",
    "constant_features": "features_all_constant",
}


@dataclass(frozen=True)
class ErrorRecord:
    file: str
    row: int | None
    column: str | None
    rule: str
    message: str

    @property
    def code(self) -> str:
        """truthsieve's name of what was found (``rule`` is the former code, kept as an alias)."""
        return CODE_OF_FORMER.get(self.rule, self.rule)

    def as_dict(self) -> dict:
        return {"file": self.file, "row": self.row, "column": self.column, "code": self.code, "rule": self.rule, "message": self.message}


ERROR_FIELDS = ("file", "row", "column", "rule", "message")


@dataclass(frozen=True)
class InputFile:
    path: str  # relative to the inbox, POSIX separators
    sha256: str
    rows: int | None
    source_id: str | None
    valid: bool

    def as_dict(self) -> dict:
        """``dataclasses.asdict`` of this flat record, without its deep copy."""
        return {"path": self.path, "sha256": self.sha256, "rows": self.rows, "source_id": self.source_id, "valid": self.valid}


def number_array(values: np.ndarray) -> pa.Array:
    """A 1-D NumPy array of integers or floats as an Arrow array, without a copy.

    ``pa.array`` would first ask pandas whether the values are a pandas object, and so
    import pandas (about a second) on a night that needs none.
    """
    values = np.ascontiguousarray(values)
    if values.dtype.kind not in "iuf" or values.ndim != 1:
        raise TypeError(f"not a 1-D array of numbers: {values.dtype}, {values.ndim} dimensions")
    return pa.Array.from_buffers(pa.from_numpy_dtype(values.dtype), len(values), [None, pa.py_buffer(values)])


@dataclass
class FileCheck:
    """The outcome of validating one group of files (the items table, or one source).

    The items check holds the validated items table (``items_table``). A valid source
    holds its labels as arrays, never as a table: ``labels`` (class indices, int8; int16
    when K > 127) and ``item_codes`` (each label's position in the items table, from the
    validation's hash join), with ``id_table`` the items table's ids that the codes index
    (one array shared by every source). When the items table is invalid there are no
    codes: ``item_ids`` then holds each label's own item id. The long table (``item_id``,
    ``source_id``, ``label``) is built only on request (:attr:`table`).

    ``contents`` keeps the bytes read of an invalid group, for its quarantine copies.
    """

    source_id: str | None
    items_table: Any = None  # the validated items table (a DataFrame); the items check only
    inputs: list[InputFile] = field(default_factory=list)
    errors: list[ErrorRecord] = field(default_factory=list)
    notes: list[Note] = field(default_factory=list)
    contents: dict[str, bytes] = field(default_factory=dict, repr=False)
    #: a valid source's class indices, one per label (None otherwise)
    labels: np.ndarray | None = field(default=None, repr=False)
    #: a valid source's labelled items as positions in the items table (None without a valid items table)
    item_codes: np.ndarray | None = field(default=None, repr=False)
    #: the items table's ids, which ``item_codes`` index
    id_table: pa.Array | None = field(default=None, repr=False)
    #: each label's item id, held only when there are no codes (the items table is invalid)
    item_ids: pa.Array | None = field(default=None, repr=False)

    @property
    def valid(self) -> bool:
        return (self.items_table is not None or self.labels is not None) and not self.errors

    @property
    def codes(self) -> SourceCodes:
        """A valid source's (source id, item codes, labels)."""
        if self.labels is None or self.item_codes is None:
            raise ValueError(f"source {self.source_id!r} holds no item codes")
        return SourceCodes(self.source_id, self.item_codes, self.labels)

    def label_item_ids(self) -> pa.Array | None:
        """Each label's item id (decoded from the codes when there are codes)."""
        if self.labels is None:
            return None
        if self.item_codes is None:
            return self.item_ids
        return self.id_table.take(number_array(self.item_codes))

    @property
    def table(self) -> "pd.DataFrame | None":
        """The items table, or a valid source's long table (``item_id``, ``source_id``,
        ``label``), built on each request and only then (tests, legacy callers): the
        screening path reads the arrays."""
        if self.labels is None:
            return self.items_table
        import pandas as pd

        return pd.DataFrame({
            "item_id": self.label_item_ids().to_pandas(), "source_id": self.source_id, "label": np.asarray(self.labels),
        })

    def summary(self) -> dict:
        """Everything but the table and bytes, as JSON-ready data (the table travels as Parquet)."""
        return {
            "source_id": self.source_id,
            "inputs": [f.as_dict() for f in self.inputs],
            "errors": [e.as_dict() for e in self.errors],
            "notes": [n.as_dict() for n in self.notes],
        }

    @classmethod
    def from_summary(cls, summary: dict, items_table: Any = None) -> "FileCheck":
        return cls(
            source_id=summary["source_id"],
            items_table=items_table,
            inputs=[InputFile(**f) for f in summary["inputs"]],
            errors=[ErrorRecord(**{k: e[k] for k in ERROR_FIELDS}) for e in summary["errors"]],
            notes=[Note(**n) for n in summary.get("notes", [])],
        )

    def _read(self, path: Path, inbox: Path, real: str | None = None, real_inbox: str | None = None) -> tuple[str, bytes | None]:
        """``path``'s bytes, kept for quarantine; ``real``: its real path, found inside the
        inbox's real path ``real_inbox`` by :func:`~truthsieve.pipeline.layout.scan_source`
        (the opened file is checked again, :func:`~truthsieve.pipeline.layout.read_real`)."""
        name = relative(path, inbox)
        try:
            data = read_inside(path, inbox) if real is None or real_inbox is None else read_real(real, real_inbox)
        except LeavesInbox:  # a file we may not open (EACCES) is unreadable, not a link
            self.errors.append(ErrorRecord(name, None, None, "link_outside_inbox", "a link whose target lies outside the inbox; not read"))
            return name, None
        except OSError as error:
            self.errors.append(ErrorRecord(name, None, None, "unreadable_file", f"cannot read: {error.strerror}"))
            return name, None
        self.contents[name] = data
        return name, data


@dataclass
class Intake:
    """What one night's inbox held after validation: the items check and each source's."""

    batch_date: str
    items: FileCheck
    sources: list[FileCheck] = field(default_factory=list)

    @property
    def valid_sources(self) -> list[FileCheck]:
        return [s for s in self.sources if s.valid]

    @property
    def quarantined(self) -> list[FileCheck]:
        return [s for s in self.sources if not s.valid]

    @property
    def label_codes(self) -> list[SourceCodes]:
        """Every valid source's item codes and labels, in intake order (needs a valid items table)."""
        return [s.codes for s in self.valid_sources]

    @property
    def labels(self) -> "pd.DataFrame":
        """The long label table of every valid source (built on request; tests, legacy callers)."""
        import pandas as pd

        frames = [s.table for s in self.valid_sources]
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=["item_id", "source_id", "label"])

    @property
    def errors(self) -> list[ErrorRecord]:
        return [e for check in [self.items, *self.sources] for e in check.errors]

    @property
    def inputs(self) -> list[InputFile]:
        return [f for check in [self.items, *self.sources] for f in check.inputs]

    @property
    def notes(self) -> list[Note]:
        return [n for check in [self.items, *self.sources] for n in check.notes]


def quarantine_bytes(inbox: str | Path, check: FileCheck) -> dict[str, bytes]:
    """Inbox-relative path -> bytes of every input of an invalid check.

    The bytes are those read at validation; a check rebuilt from its summary (in another
    process) is re-read only through a path inside the inbox and only if its sha256 is
    still the one recorded, so a copy is never of anything but what was validated.
    """
    root = Path(inbox) if isinstance(inbox, str) else inbox
    copies = {}
    for f in check.inputs:
        data = check.contents.get(f.path)
        if data is None:
            try:  # object storage has no links; a local inbox is read only inside itself
                data = read_inside(root / f.path, root) if isinstance(root, Path) else (root / f.path).read_bytes()
            except OSError:
                continue
            if sha256(data) != f.sha256:
                continue
        copies[f.path] = data
    return copies


#: Files smaller than this are read on one thread and without pre-buffering (for a small
#: label file the threads and the coalesced read cost more than the decoding).
SMALL_FILE_BYTES = 1 << 22


def parse(relative_path: str, data: bytes) -> tuple[pa.Table | None, ErrorRecord | None]:
    small = len(data) < SMALL_FILE_BYTES
    try:  # read_table would load the dataset layer
        table = pq.ParquetFile(pa.BufferReader(data), pre_buffer=not small).read(use_threads=not small)
    except (pa.ArrowException, OSError, ValueError) as error:
        return None, ErrorRecord(relative_path, None, None, "unreadable_parquet", f"not a readable Parquet file: {error}")
    if table.num_rows == 0:
        return None, ErrorRecord(relative_path, None, None, "empty_file", "the file has no rows")
    return table, None


def row_errors(relative_path: str, rows: np.ndarray, column: str, rule: str, message: str) -> list[ErrorRecord]:
    records = [ErrorRecord(relative_path, int(r) + 1, column, rule, message) for r in rows[:MAX_ROWS_PER_RULE]]
    if len(rows) > MAX_ROWS_PER_RULE:
        records.append(
            ErrorRecord(relative_path, None, column, rule, f"{len(rows) - MAX_ROWS_PER_RULE} more rows break this rule")
        )
    return records


