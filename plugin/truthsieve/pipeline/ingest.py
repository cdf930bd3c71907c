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

import re
from collections.abc import Iterable, Mapping
from dataclasses import replace
from pathlib import Path

import numpy as np
import pyarrow as pa

from truthsieve.core.ids import id_array
from truthsieve.core.rules import RULE_COLUMN_PREFIX
from truthsieve.pipeline import layout
from truthsieve.pipeline.classes import BINARY, ClassAlphabet, decode_rule_column
from truthsieve.pipeline.label_files import duplicate_errors, id_errors, is_string, validate_labels
from truthsieve.pipeline.layout import ITEMS_FILE, display, inside, relative, sha256
from truthsieve.pipeline.records import ErrorRecord, FileCheck, InputFile, parse, quarantine_bytes, row_errors

__all__ = ["ErrorRecord", "FileCheck", "InputFile", "quarantine_bytes", "validate_items", "validate_source", "source_folders", "batch_folder"]

SOURCE_ID_RE = re.compile(layout.SOURCE_ID_PATTERN)
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
    inbox, folder = Path(inbox), Path(folder)
    item_ids = None if item_ids is None else id_array(item_ids)
    source_id = display(folder.name.removeprefix(layout.SOURCE_PREFIX))
    folder_name = relative(folder, inbox)
    check = FileCheck(source_id=source_id)
    if not inside(folder, inbox):
        check.errors.append(ErrorRecord(folder_name, None, None, "link_outside_inbox", "the source folder is a link whose target lies outside the inbox; not read"))
        return check
    entries = layout.scan_source(inbox, folder)
    check.notes += entries.notes
    for path, code in entries.refused:
        check.errors.append(ErrorRecord(relative(path, inbox), None, None, code, layout.NOTE_CODES[code]))
    contents = []
    for path in entries.label_files:
        name, data = check._read(path, inbox)
        if data is not None:
            contents.append((name, data))
            check.inputs.append(InputFile(name, sha256(data), None, source_id, False))
    if not SOURCE_ID_RE.fullmatch(source_id):
        check.errors.append(ErrorRecord(folder_name, None, "source_id", "bad_source_id", f"source id must match {layout.SOURCE_ID_PATTERN}"))
        return check
    if source_id not in registry:
        check.errors.append(ErrorRecord(folder_name, None, "source_id", "unknown_source", f"source {source_id} is not in the registry"))
        return check
    if not entries.label_files and not entries.refused:
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
        found, errors = validate_labels(name, table, item_ids, classes)
        check.errors += errors
        if found is not None:
            files.append(found)
            places.append(name)
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
