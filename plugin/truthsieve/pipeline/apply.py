"""Applying the rule in force to new items: label every row of an items table.

Reads only the columns the rule needs (``item_id`` and the threshold's feature, or the
listed rule's ``rule__<name>`` column), labels them in one vectorised pass over Arrow
arrays, and writes ``item_id``, ``label`` and ``rule`` (the rule's JSON form, dictionary
encoded so it costs one value) to Parquet through a temporary file and a rename. The
file's schema metadata carries the whole of ``in_force.json``: rule, since, ledger line.

Class names or indices (``--labels`` on the command line, ``labels`` here): ``indices``
(the default) writes ``label`` as int16 class indices, byte for byte as before K classes;
``names`` writes each class's name from the configuration's ``classes`` (dictionary
encoded: the names are stored once; a configuration without ``classes`` has no names, so
``names`` is refused). With an alphabet given (``--config``), its ``classes`` must be those
the in-force night's ``decision.json`` recorded (none for a binary night: a binary rule's
0/1 would fit inside any alphabet, so the indices alone cannot tell), the rule's classes and
a listed rule's ``rule__<name>`` values are checked against ``0..K-1``, and the file's
metadata also carries ``truthsieve.classes`` (the names, in index order).
"""

from __future__ import annotations

import json
import os
import uuid
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from truthsieve.core.rules import RULE_COLUMN_PREFIX
from truthsieve.exceptions import InputError
from truthsieve.pipeline.classes import ClassAlphabet, class_name_array, decode_rule_column
from truthsieve.pipeline.outputs import batch_output
from truthsieve.pipeline.verdicts import in_force


def _needed_column(rule: dict) -> str | None:
    if rule["kind"] == "threshold":
        return rule["feature"]
    if rule["kind"] == "listed":
        return RULE_COLUMN_PREFIX + rule["name"]
    return None


def _written_by_apply(path: Path) -> bool:
    """True for a Parquet file an earlier ``apply`` wrote (it carries the rule's identity)."""
    try:
        metadata = pq.read_schema(path).metadata or {}
    except (OSError, pa.ArrowException):
        return False
    return b"truthsieve.in_force" in metadata


def _first_bad_row(mask) -> int:
    return int(np.flatnonzero(np.asarray(mask))[0]) + 1


LABEL_FORMS = ("indices", "names")


def _rule_classes(rule: dict) -> list[int]:
    if rule["kind"] == "constant":
        return [int(rule["label"])]
    if rule["kind"] == "threshold":
        return [int(rule["above"]), int(rule.get("below", 1 - int(rule["above"])))]
    return []


def check_rule_classes(rule: dict, classes: ClassAlphabet, since: str | None = None) -> None:
    """Refuse a rule naming a class the alphabet does not have (a configuration of another batch)."""
    outside = [k for k in _rule_classes(rule) if not 0 <= k < classes.count]
    if outside:
        when = f" since {since}" if since else ""
        raise InputError(
            f"the rule in force{when} gives class {outside[0]}, but the configuration has {classes.count} classes "
            f"(0..{classes.count - 1}); is --config the one its nights were screened with?"
        )


def _describe_classes(names) -> str:
    return "no classes (binary, 0/1)" if names is None else f"classes [{', '.join(names)}]"


def check_night_classes(out: str | Path, since: str, classes: ClassAlphabet, config_name: str = "the configuration") -> None:
    """Refuse a configuration whose ``classes`` are not those the in-force night ``since``
    recorded in its ``decision.json`` (``classes`` absent: a binary night, configured without)."""
    path = batch_output(out, since) / "decision.json"
    try:
        recorded = json.loads(path.read_text()).get("classes")
    except (OSError, ValueError) as error:
        raise InputError(f"{path}: cannot read the in-force night's decision to check its classes ({error})") from None
    wanted = None if recorded is None else tuple(recorded)
    if classes.names != wanted:
        raise InputError(
            f"{config_name} has {_describe_classes(classes.names)}, but the rule in force since {since} was fitted "
            f"with {_describe_classes(wanted)} ({path}); give --config the configuration its nights were screened with"
        )


def _checked_listed(table: pa.Table, rule: dict, classes: ClassAlphabet, source: str) -> pa.Array:
    name = _needed_column(rule)
    indices, errors = decode_rule_column(source, table.column(name), name, classes)
    if errors:
        first = errors[0]
        where = f"row {first.row}, " if first.row is not None else ""
        raise InputError(f"{source}: {where}column {name!r}: {first.message}")
    return pa.array(indices.astype(np.int16))


def label_items(table: pa.Table, rule: dict, source: str = "items", classes: ClassAlphabet | None = None) -> pa.Array:
    """The rule's label of every row of ``table`` (int16 class indices).

    :param classes: when given, a listed rule's column is checked against ``0..K-1``.
    :raises InputError: naming ``source``, column and first bad row.
    """
    n = table.num_rows
    if rule["kind"] == "constant":
        return pa.array(np.full(n, int(rule["label"]), dtype=np.int16))
    column_name = _needed_column(rule)
    column = table.column(column_name)
    if column.null_count:
        raise InputError(f"{source}: row {_first_bad_row(column.is_null().to_numpy(zero_copy_only=False))}, column {column_name!r}: null value")
    if rule["kind"] == "listed" and classes is not None:
        return _checked_listed(table, rule, classes, source)
    if rule["kind"] == "listed":
        if not (pa.types.is_boolean(column.type) or pa.types.is_integer(column.type)):
            raise InputError(f"{source}: column {column_name!r} must be bool or integer class indices, not {column.type}")
        return pc.cast(column, pa.int16()).combine_chunks()
    if not (pa.types.is_integer(column.type) or pa.types.is_floating(column.type)):
        raise InputError(f"{source}: column {column_name!r} must be numeric, not {column.type}")
    values = column.to_numpy().astype(np.float64, copy=False)
    finite = np.isfinite(values)
    if not finite.all():
        raise InputError(f"{source}: row {_first_bad_row(~finite)}, column {column_name!r}: value is not finite")
    above = int(rule["above"])
    below = int(rule.get("below", 1 - above))
    return pa.array(np.where(values > rule["cut"], above, below).astype(np.int16))


def apply_rule(
    out: str | Path,
    items_path: str | Path,
    write_path: str | Path,
    as_of: str | None = None,
    classes: ClassAlphabet | None = None,
    labels: str = "indices",
    config_name: str = "the configuration",
) -> dict:
    """Label ``items_path`` with the rule in force (on night ``as_of`` if given) and write
    ``write_path``. Returns the rule's identity (``in_force.json``'s content) and the row count.

    :param classes: the configuration's class alphabet; must be the in-force night's classes
        (:func:`check_night_classes`); checks the rule's classes against it.
    :param labels: ``indices`` (int16, the default) or ``names`` (the classes' names; needs
        ``classes`` with names).
    :param config_name: what error messages call the configuration (its path on the command line).
    :raises InputError: no rule in force, a missing column, an unreadable file, writing over
        the input, a configuration of other classes, a class outside the alphabet, or
        ``names`` without named classes.
    """
    if labels not in LABEL_FORMS:
        raise InputError(f"labels must be one of {', '.join(LABEL_FORMS)}, not {labels!r}")
    if labels == "names" and classes is None:
        raise InputError("writing class names needs the configuration (--config FILE), whose classes name them")
    if labels == "names" and classes is not None and classes.names is None:
        raise InputError(f"--labels names needs a configuration with classes; {config_name} has none (write --labels indices)")
    items_path, write_path = Path(items_path), Path(write_path)
    state = in_force(out, as_of)
    if state["rule"] is None:
        when = f" on {as_of}" if as_of else ""
        raise InputError(f"{out}: no rule in force{when}: no night was aggregated or approved yet")
    if write_path.resolve() == items_path.resolve():
        raise InputError(f"{write_path}: --write must not be the items file (input files are never modified)")
    if not write_path.parent.is_dir():
        raise InputError(f"{write_path}: folder {write_path.parent} does not exist")
    if write_path.exists() and not _written_by_apply(write_path):
        raise InputError(f"{write_path}: exists and was not written by truthsieve apply; refusing to overwrite it")
    try:
        schema = pq.read_schema(items_path)
    except (OSError, pa.ArrowException) as error:
        raise InputError(f"{items_path}: cannot read it as Parquet ({error})") from None
    rule = state["rule"]
    if classes is not None:
        check_night_classes(out, state["since"], classes, config_name)
        check_rule_classes(rule, classes, state.get("since"))
    needed = ["item_id"] + [c for c in [_needed_column(rule)] if c]
    missing = [c for c in needed if c not in schema.names]
    if missing:
        why = " (a listed rule needs its rule__ column)" if rule["kind"] == "listed" else ""
        raise InputError(f"{items_path}: column {missing[0]!r} is missing; the rule in force since {state['since']} needs it{why}")
    table = pq.read_table(items_path, columns=needed)
    ids = table.column("item_id")
    if not (pa.types.is_string(ids.type) or pa.types.is_large_string(ids.type)):
        raise InputError(f"{items_path}: column 'item_id' must be strings, not {ids.type}")
    if ids.null_count:
        raise InputError(f"{items_path}: row {_first_bad_row(ids.is_null().to_numpy(zero_copy_only=False))}, column 'item_id': null item id")
    distinct = pc.unique(ids)
    if len(distinct) != len(ids):
        codes = pc.index_in(ids, value_set=distinct).to_numpy(zero_copy_only=False)
        repeated = np.ones(len(codes), dtype=bool)
        repeated[np.unique(codes, return_index=True)[1]] = False
        raise InputError(f"{items_path}: row {_first_bad_row(repeated)}, column 'item_id': item id appears on an earlier row")
    indices = label_items(table, rule, str(items_path), classes)
    written = class_name_array(indices.to_numpy(), classes) if labels == "names" else indices
    identity = json.dumps(rule, sort_keys=True)
    rule_column = pa.DictionaryArray.from_arrays(pa.array(np.zeros(table.num_rows, dtype=np.int32)), pa.array([identity]))
    result = pa.table({"item_id": ids, "label": written, "rule": rule_column})
    metadata = {"truthsieve.in_force": json.dumps(state, sort_keys=True)}
    if classes is not None:
        metadata["truthsieve.classes"] = json.dumps(list(classes.labels))
    result = result.replace_schema_metadata(metadata)
    temporary = write_path.with_name(f".{write_path.name}.{uuid.uuid4().hex}.tmp")
    try:
        pq.write_table(result, temporary)
        os.replace(temporary, write_path)
    finally:
        temporary.unlink(missing_ok=True)
    return {**state, "rows": table.num_rows, "written": str(write_path)}
