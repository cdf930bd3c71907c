"""The class alphabet and the edge where label columns become class indices.

A configuration may name its classes (``classes: [reject, feed, milling, premium]``);
without ``classes`` there are two unnamed classes 0 and 1 (K = 2), as before K classes.
The core only ever sees class indices ``0..K-1`` (int8, or int16 when K > 127); the
names live here and in the outputs.

A label column may hold

* integer class indices ``0..K-1`` (any Arrow integer type),
* class names (strings, plain or dictionary encoded), only when ``classes`` is configured,
* bool (false = class 0, true = class 1), only when K = 2.

Anything else is an :class:`~truthsieve.pipeline.records.ErrorRecord` naming the file,
the column and the first offending rows (row 1 = the first row), in the form ingest
uses: a column of another type is one record without a row (``wrong_type``); a null is
``null_label``; an index outside ``0..K-1`` is ``label_out_of_range`` when K = 2 (the
binary default's record, message unchanged) and ``class_index_out_of_range`` when K > 2;
a string that names no class is ``unknown_class_name``.

``listed`` rules' ``rule__<name>`` columns hold class indices (bool when K = 2):
:func:`decode_rule_column` checks and decodes them the same way (``null_rule_value``,
``rule_class_out_of_range``).

A class name may not be mistaken for an index or a bool: no name that reads as a number
(``"2"``, ``"1.5"``, ``"nan"``, ``"inf"``) or as ``true``/``false``, none empty, none with
leading or trailing white space or a control character, none given twice.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from truthsieve.pipeline.records import ErrorRecord, row_errors

__all__ = ["ClassAlphabet", "BINARY", "check_class_names", "label_type_error", "decode_labels", "decode_rule_column"]

MAX_CLASSES = 32767  # the largest K whose indices fit int16
BOOLEAN_WORDS = ("true", "false")
CONTROL = re.compile(r"[\x00-\x1f\x7f]")


def _reads_as_number(name: str) -> bool:
    try:
        float(name)  # accepts "2", " 2", "1e3", "nan", "inf", "1_000"
    except ValueError:
        return False
    return True


def check_class_names(names: Sequence[str]) -> list[str]:
    """The configuration's ``classes``, checked; raises ``ValueError`` with one line naming every problem."""
    names = list(names)
    problems = []
    if len(names) < 2:
        problems.append(f"needs at least 2 classes, not {len(names)}")
    if len(names) > MAX_CLASSES:
        problems.append(f"at most {MAX_CLASSES} classes, not {len(names)}")
    for position, name in enumerate(names):
        if not isinstance(name, str):
            problems.append(
                f"class {position} must be a name (a string), not {'null' if name is None else type(name).__name__} {name!r}"
                " (YAML reads unquoted yes, no, on, off, true, false, numbers and null as other types: quote the name)"
            )
        elif not name:
            problems.append(f"class {position} has an empty name")
        elif name != name.strip() or CONTROL.search(name):
            problems.append(f"class {position} ({name!r}) has leading or trailing white space or a control character")
        elif _reads_as_number(name) or name.lower() in BOOLEAN_WORDS:
            problems.append(f"class {position} ({name!r}) could be mistaken for a class index or a bool; use a word")
    strings = [n for n in names if isinstance(n, str)]
    twice = sorted({n for n in strings if strings.count(n) > 1})
    if twice:
        problems.append(f"classes named twice: {twice}")
    if problems:
        raise ValueError("; ".join(problems))
    return names


@dataclass(frozen=True)
class ClassAlphabet:
    """The classes of a configuration: ``names`` when configured, else two unnamed classes."""

    names: tuple[str, ...] | None = None

    @classmethod
    def from_config(cls, classes: Sequence[str] | None) -> "ClassAlphabet":
        return cls(None if classes is None else tuple(check_class_names(classes)))

    @property
    def count(self) -> int:
        """K, the number of classes."""
        return 2 if self.names is None else len(self.names)

    @property
    def labels(self) -> tuple[str, ...]:
        """What each class is called in outputs: its name, or its index as text when unnamed."""
        return self.names if self.names is not None else tuple(str(k) for k in range(self.count))

    @property
    def index_type(self) -> np.dtype:
        return np.dtype(np.int8) if self.count <= 127 else np.dtype(np.int16)

    def describe(self) -> str:
        """The accepted label forms, for error messages."""
        if self.names is None:
            return "bool or integer 0/1"
        forms = f"integer class indices 0..{self.count - 1} or class names ({', '.join(self.names)})"
        return ("bool, " + forms) if self.count == 2 else forms


BINARY = ClassAlphabet()


def _is_string(kind: pa.DataType) -> bool:
    if pa.types.is_dictionary(kind):
        kind = kind.value_type
    return pa.types.is_string(kind) or pa.types.is_large_string(kind)


def label_type_error(relative_path: str, kind: pa.DataType, classes: ClassAlphabet = BINARY, column: str = "label") -> ErrorRecord | None:
    """One ``wrong_type`` record when a label column's Arrow type cannot hold labels of ``classes``."""
    if pa.types.is_integer(kind):
        return None
    if pa.types.is_boolean(kind) and classes.count == 2:
        return None
    if _is_string(kind) and classes.names is not None:
        return None
    if pa.types.is_boolean(kind):
        why = f"label is bool, but the configuration has {classes.count} classes; label must be {classes.describe()}"
    else:
        why = f"label must be {classes.describe()}, not {kind}"
    return ErrorRecord(relative_path, None, column, "wrong_type", why)


def _largest(kind: pa.DataType) -> int:
    return int(np.iinfo(kind.to_pandas_dtype()).max)


def _rows(mask) -> np.ndarray:
    return np.flatnonzero(np.asarray(pc.fill_null(mask, False)))


def _showing_found(records: list[ErrorRecord], values: pa.Array, say) -> list[ErrorRecord]:
    """Each row's record with its message from ``say(value found on that row)``."""
    return [r if r.row is None else replace(r, message=say(values[r.row - 1].as_py())) for r in records]


def _indices(relative_path: str, values: pa.Array, classes: ClassAlphabet, column: str, out_of_range: tuple[str, str]):
    """Integer or bool values -> (indices, errors) for the rows that are not null.

    With K > 2 each out-of-range record says the index found; the K = 2 message stays the
    binary one, word for word (binary decisions are kept byte for byte).
    """
    count = classes.count
    if pa.types.is_boolean(values.type):
        return pc.cast(values, pa.int8()).to_numpy(zero_copy_only=False), []
    # compared in the column's own type, so a huge uint64 or int64 cannot wrap around
    outside = pc.greater_equal(values, pa.scalar(count, values.type) if count <= _largest(values.type) else None)
    if pa.types.is_signed_integer(values.type):
        outside = pc.or_kleene(outside, pc.less(values, pa.scalar(0, values.type)))
    rows = _rows(outside)
    if len(rows):
        rule, message = out_of_range
        records = row_errors(relative_path, rows, column, rule, message)
        if count > 2:
            records = _showing_found(records, values, lambda found: f"{message}, not {found}")
        return None, records
    return pc.cast(pc.fill_null(values, 0), pa.int64()).to_numpy(zero_copy_only=False), []


def _unknown_name_message(found: str, classes: ClassAlphabet) -> str:
    hint = "; a class index belongs in an integer column, not in text" if found.strip().lstrip("+-").isdigit() else ""
    return (
        f"label {found!r} names no class; the classes are {', '.join(classes.names)} "
        f"(names match exactly, case included){hint}"
    )


def decode_labels(
    relative_path: str, column: pa.Array | pa.ChunkedArray, classes: ClassAlphabet = BINARY, column_name: str = "label"
) -> tuple[np.ndarray | None, list[ErrorRecord]]:
    """A label column -> (class indices of every row, errors); indices are None when there are errors.

    >>> import pyarrow as pa
    >>> grades = ClassAlphabet(("reject", "feed", "milling", "premium"))
    >>> decode_labels("f.parquet", pa.array(["feed", "premium", "reject"]), grades)[0].tolist()
    [1, 3, 0]
    """
    values = column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column
    wrong = label_type_error(relative_path, values.type, classes, column_name)
    if wrong:
        return None, [wrong]
    errors = row_errors(relative_path, _rows(values.is_null()), column_name, "null_label", "label is null")
    if _is_string(values.type):
        if pa.types.is_dictionary(values.type):
            values = values.dictionary_decode()
        found = pc.index_in(values, value_set=pa.array(classes.names, values.type))
        unknown = _rows(pc.and_(values.is_valid(), found.is_null()))
        errors += _showing_found(
            row_errors(relative_path, unknown, column_name, "unknown_class_name", "label names no class"),
            values, lambda found: _unknown_name_message(found, classes),
        )
        indices = pc.fill_null(found, 0).to_numpy(zero_copy_only=False)
    else:
        if classes.count == 2:
            out_of_range = ("label_out_of_range", "label must be 0 or 1")
        else:
            out_of_range = ("class_index_out_of_range", f"label must be a class index 0..{classes.count - 1}")
        indices, more = _indices(relative_path, values, classes, column_name, out_of_range)
        errors += more
    if errors:
        return None, errors
    return np.asarray(indices).astype(classes.index_type), []


def decode_rule_column(
    relative_path: str, column: pa.Array | pa.ChunkedArray, column_name: str, classes: ClassAlphabet = BINARY
) -> tuple[np.ndarray | None, list[ErrorRecord]]:
    """A listed rule's ``rule__<name>`` column (class indices; bool when K = 2) -> (indices, errors)."""
    values = column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column
    kind = values.type
    if not (pa.types.is_integer(kind) or (pa.types.is_boolean(kind) and classes.count == 2)):
        allowed = "bool or integer class indices 0/1" if classes.count == 2 else f"integer class indices 0..{classes.count - 1}"
        return None, [ErrorRecord(relative_path, None, column_name, "wrong_type", f"rule column must hold {allowed}, not {kind}")]
    errors = row_errors(relative_path, _rows(values.is_null()), column_name, "null_rule_value", "rule value is null")
    indices, more = _indices(
        relative_path, values, classes, column_name,
        ("rule_class_out_of_range", f"rule value must be a class index 0..{classes.count - 1}"),
    )
    errors += more
    if errors:
        return None, errors
    return np.asarray(indices).astype(classes.index_type), []


def class_name_array(indices, classes: ClassAlphabet) -> pa.DictionaryArray:
    """Class indices -> the classes' names, dictionary encoded (one copy of each name)."""
    codes = np.asarray(indices)
    if len(codes) and (codes.min() < 0 or codes.max() >= classes.count):
        raise ValueError(f"class index outside 0..{classes.count - 1}")
    return pa.DictionaryArray.from_arrays(pa.array(codes.astype(np.int16)), pa.array(list(classes.labels), pa.string()))

