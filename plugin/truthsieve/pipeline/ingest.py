"""Read and validate one night's inbox: the items table and each source's label files.

Layout (the contract)::

    <inbox>/batch_date=YYYY-MM-DD/items.parquet
    <inbox>/batch_date=YYYY-MM-DD/source_id=<id>/<any>.parquet

Every problem becomes an :class:`ErrorRecord` naming the file (relative to the inbox),
the row (1 = first row; None when the problem is not about one row), the column and
the rule broken. Entries that are not part of the layout become notes (see
:mod:`truthsieve.pipeline.layout`). Files are read once, as bytes, through their
resolved path and only when that lies inside the inbox, so the recorded sha256 is the
hash of exactly what was parsed and quarantine copies are those same bytes. Nothing
here writes, moves or deletes anything.

Numeric domain (checked here, so the core never meets an overflow): a feature value
must be finite with ``|x| <= FEATURE_LIMIT`` (1e300), so the midpoint of any two values
is finite; an ``item_weight`` must be 0 or in ``[ITEM_WEIGHT_MIN, ITEM_WEIGHT_MAX]``
(1e-150 to 1e150) and the weights of the table must sum to more than 0 and at most
``ITEM_WEIGHT_MAX``, so every risk's numerator and denominator is a finite positive sum
and so are the squares in the effective sample size ``(sum u)^2 / sum u^2``.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import replace
from pathlib import Path

import numpy as np
import pyarrow as pa

from truthsieve.core.rules import RULE_COLUMN_PREFIX
from truthsieve.pipeline import layout
from truthsieve.pipeline.classes import BINARY, ClassAlphabet, decode_rule_column
from truthsieve.pipeline.label_files import id_errors, is_string
from truthsieve.pipeline.layout import ITEMS_FILE, inside, relative, sha256
from truthsieve.pipeline.records import ErrorRecord, FileCheck, InputFile, parse, quarantine_bytes, row_errors
from truthsieve.pipeline.source_files import validate_source, validate_sources

__all__ = ["ErrorRecord", "FileCheck", "InputFile", "quarantine_bytes", "validate_items", "validate_source", "validate_sources", "source_folders", "batch_folder"]

FEATURE_LIMIT = 1e300
ITEM_WEIGHT_MIN, ITEM_WEIGHT_MAX = 1e-150, 1e150


def batch_folder(inbox: str | Path, batch_date: str) -> Path:
    return layout.batch_dir(Path(inbox), batch_date)


def _is_number(kind: pa.DataType) -> bool:
    return pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind)


def _schema_errors(relative_path: str, schema: pa.Schema, features: Iterable[str], listed: bool, named: bool = False) -> list[ErrorRecord]:
    errors = []
    if "item_id" not in schema.names:
        errors.append(ErrorRecord(relative_path, None, "item_id", "missing_column", "required column item_id is missing"))
    elif not is_string(schema.field("item_id").type):
        errors.append(ErrorRecord(relative_path, None, "item_id", "wrong_type", f"item_id must be string, not {schema.field('item_id').type}"))
    for name in features:
        if name not in schema.names:
            errors.append(ErrorRecord(
                relative_path, None, name, "configured_column_missing",
                f"the configuration (rule_class.features) names column {name}, which this items table does not have",
            ))
    for name in schema.names:
        kind = schema.field(name).type
        if name == "item_id":
            continue
        if name.startswith(RULE_COLUMN_PREFIX):
            if not named and not pa.types.is_boolean(kind):  # named classes: decode_rule_column checks the type
                errors.append(ErrorRecord(relative_path, None, name, "wrong_type", f"rule column must be bool, not {kind}"))
        elif not _is_number(kind):
            errors.append(ErrorRecord(relative_path, None, name, "wrong_type", f"feature columns must be numeric, not {kind}"))
    if listed and not any(n.startswith(RULE_COLUMN_PREFIX) for n in schema.names):
        errors.append(ErrorRecord(relative_path, None, None, "missing_column", f"the listed rule class needs {RULE_COLUMN_PREFIX}* columns"))
    return errors


def _weight_errors(relative_path: str, weights: np.ndarray) -> list[ErrorRecord]:
    finite = np.isfinite(weights)
    errors = row_errors(relative_path, np.flatnonzero(~finite), "item_weight", "non_finite_weight", "item_weight is NaN, infinite or null")
    errors += row_errors(relative_path, np.flatnonzero(weights < 0), "item_weight", "negative_item_weight", "item_weight is negative")
    errors += row_errors(
        relative_path, np.flatnonzero(finite & ((weights > ITEM_WEIGHT_MAX) | ((weights > 0) & (weights < ITEM_WEIGHT_MIN)))),
        "item_weight", "item_weight_out_of_range", f"item_weight must be 0 or between {ITEM_WEIGHT_MIN:g} and {ITEM_WEIGHT_MAX:g}",
    )
    if errors:
        return errors
    total = float(np.sum(weights / ITEM_WEIGHT_MAX)) * ITEM_WEIGHT_MAX  # scaled: the sum itself cannot overflow
    if not total > 0:
        errors.append(ErrorRecord(relative_path, None, "item_weight", "zero_total_item_weight", "every item_weight is 0, so no risk can be measured"))
    elif total > ITEM_WEIGHT_MAX:
        errors.append(ErrorRecord(relative_path, None, "item_weight", "item_weight_total_out_of_range", f"the item weights sum to more than {ITEM_WEIGHT_MAX:g}"))
    return errors


def validate_items(
    inbox: str | Path, batch_date: str, features: Iterable[str] = (), listed: bool = False, kind: str | None = None,
    classes: ClassAlphabet = BINARY,
) -> FileCheck:
    """Validate ``items.parquet``: unique string ids without control characters, finite
    numeric features within the numeric domain, ``item_weight`` within the numeric
    domain, boolean ``rule__*`` columns. The batch folder's notes travel on this check.

    :param kind: the rule class kind; with ``threshold`` (the default when features are
        given and ``listed`` is false) every feature being constant is an error.
    :param classes: the configuration's class alphabet. When ``classes`` is configured,
        ``rule__*`` columns hold class indices (bool too when K = 2) and are checked by
        :func:`~truthsieve.pipeline.classes.decode_rule_column`; without it they are bool.
    """
    inbox, features = Path(inbox), list(features)
    scan = layout.scan_batch(inbox, batch_date)
    check = FileCheck(source_id=None, notes=list(scan.notes))
    path = batch_folder(inbox, batch_date) / ITEMS_FILE
    if scan.items is None or not (scan.items.is_file() or not inside(scan.items, inbox)):
        check.errors.append(ErrorRecord(relative(path, inbox), None, None, "missing_file", "the batch has no items table"))
        return check
    name, data = check._read(path, inbox)
    if data is None:
        return check
    table, error = parse(name, data)
    check.inputs.append(InputFile(name, sha256(data), table.num_rows if table else None, None, False))
    if error:
        check.errors.append(error)
        return check
    errors = check.errors
    named = classes.names is not None
    errors += _schema_errors(name, table.schema, features, listed, named)
    rule_errors = {
        column: decode_rule_column(name, table.column(column), column, classes)[1]
        for column in table.schema.names if named and column.startswith(RULE_COLUMN_PREFIX)
    }
    errors += [e for found in rule_errors.values() for e in found if e.rule == "wrong_type"]
    if errors:
        return check

    errors += id_errors(name, table.column("item_id"))
    frame = table.to_pandas()  # imports pandas: the items table is still a DataFrame
    ids = frame["item_id"]
    errors += row_errors(
        name, np.flatnonzero(ids.duplicated(keep="first").to_numpy() & ids.notna().to_numpy()),
        "item_id", "duplicate_item_id", "item_id appears on an earlier row",
    )
    constant = True
    for feature in features:
        values = frame[feature].to_numpy(dtype=np.float64, na_value=np.nan)
        finite = np.isfinite(values)
        errors += row_errors(name, np.flatnonzero(~finite), feature, "non_finite_feature", "feature is NaN, infinite or null")
        errors += row_errors(
            name, np.flatnonzero(finite & (np.abs(values) > FEATURE_LIMIT)), feature, "feature_out_of_range",
            f"feature magnitude is above {FEATURE_LIMIT:g}",
        )
        constant = constant and bool((values == values[0]).all())
    if (kind or ("listed" if listed else "threshold")) == "threshold" and features and constant and not errors:
        errors.append(ErrorRecord(
            name, None, features[0], "constant_features",
            f"every configured feature ({', '.join(features)}) has one value on every item, so no threshold can be fitted",
        ))
    if "item_weight" in frame.columns:
        errors += _weight_errors(name, frame["item_weight"].to_numpy(dtype=np.float64, na_value=np.nan))
    for column in frame.columns:
        if column in rule_errors:
            errors += rule_errors[column]  # null_rule_value, rule_class_out_of_range
        elif column.startswith(RULE_COLUMN_PREFIX):
            errors += row_errors(name, np.flatnonzero(frame[column].isna().to_numpy()), column, "null_rule_value", "rule value is null")
    if not errors:
        check.items_table = frame
        check.inputs[0] = replace(check.inputs[0], valid=True)
        check.contents.clear()
    return check


def source_folders(inbox: str | Path, batch_date: str) -> list[Path]:
    """The ``source_id=*`` folders of a batch, sorted by name (links leaving the inbox
    included: :func:`validate_source` records their refusal)."""
    return layout.scan_batch(inbox, batch_date).sources

