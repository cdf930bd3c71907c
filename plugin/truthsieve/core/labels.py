"""Turn each source's labels into the arrays the core computes on.

Validation hands over each source's labels as arrays: item codes (positions in the
items table, from one hash join per file) and class indices (:class:`SourceCodes`);
:func:`build_label_matrix` is the one place that turns them into dense arrays, without
a string per label. It also takes the long table (``item_id``, ``source_id``,
``label``) that tests and hand-made nights use. Items and sources are sorted by id, so
the result does not depend on the order of rows in any input.

Definitions (see the contract): source ``i`` labelled the items ``S_i`` with labels
``y_ij``; item ``j`` has weight ``u_j >= 0``; the private risk of a rule ``c`` is

    R_i(c) = sum_{j in S_i} u_j [c(x_j) != y_ij] / sum_{j in S_i} u_j

and the global risk is ``R(c) = sum_i w_i R_i(c)`` with normalised weights ``w_i``.
Labels are class indices ``0 .. K-1`` (``K = n_classes``, default 2; decoding class
names or bools is the pipeline's job). Both risks are linear in the rule's
predictions, so each is carried as one cost array of shape ``(m, K)``: ``costs[j, k]``
is what predicting class ``k`` on item ``j`` adds to the risk (see
:mod:`truthsieve.core.statistics`, which holds the sparse per-source form).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property
from typing import TYPE_CHECKING, Any, NamedTuple, Union

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from truthsieve.core.ids import as_ids, id_array
from truthsieve.core.statistics import FloatArray, SourceLabels, label_dtype, private_costs, source_statistics, sum_statistics
from truthsieve.exceptions import ClassIndexError, InputError, NoItemsError, NoSourcesError, UnknownReferenceError, WeightError

if TYPE_CHECKING:
    import pandas as pd


class SourceCodes(NamedTuple):
    """One source's labels as arrays.

    :param source_id: the source's id.
    :param item_codes: each label's item as its row position in the items table (as given,
        not sorted).
    :param labels: each label's class index, aligned with ``item_codes``.
    """

    source_id: str
    item_codes: Any
    labels: Any


#: what :func:`build_label_matrix` takes: every source's codes, or the long label table
Labels = Union[Sequence[SourceCodes], "pd.DataFrame"]


@dataclass(frozen=True)
class LabelMatrix:
    """Dense labels of ``n`` sources on ``m`` shared items.

    The dense ``(n, m)`` arrays serve the statistics that need every label at once
    (reliability, agreement); the fit and the per-source analysis use only
    :meth:`global_costs` and :meth:`source_labels`.

    :param item_ids: sorted item ids, shape ``(m,)``.
    :param source_ids: sorted source ids, length ``n``.
    :param labels: ``(n, m)`` class indices, int8 (int16 past 127 classes; 0 where not labelled).
    :param labelled: ``(n, m)`` bool array, True where source ``i`` labelled item ``j``.
    :param item_weights: ``(m,)`` item weights ``u_j``.
    :param source_weights: ``(n,)`` normalised source weights (sum to 1).
    :param n_classes: ``K``, the number of classes.
    """

    item_ids: np.ndarray
    source_ids: tuple[str, ...]
    labels: np.ndarray
    labelled: np.ndarray
    item_weights: FloatArray
    source_weights: FloatArray
    n_classes: int = 2

    @property
    def n_sources(self) -> int:
        return len(self.source_ids)

    @property
    def n_items(self) -> int:
        return len(self.item_ids)

    @cached_property
    def sources(self) -> tuple[SourceLabels, ...]:
        """Every source's sparse labels, in source order (computed once)."""
        out = []
        for i, row in enumerate(self.labelled):
            items = np.flatnonzero(row)
            out.append(
                source_statistics(
                    self.source_ids[i], items, self.labels[i, items], self.item_weights, float(self.source_weights[i])
                )
            )
        return tuple(out)

    @cached_property
    def coverage_weight(self) -> FloatArray:
        """``sum_{j in S_i} u_j`` per source: the denominator of ``R_i`` (computed once)."""
        return np.array([s.coverage for s in self.sources], dtype=np.float64)

    @cached_property
    def _global_costs(self) -> FloatArray:
        # Sum over sources of w_i / U_i * u_j on each source's own items, O(K sum_i |S_i|).
        return sum_statistics(self.sources, self.n_items, self.n_classes)

    @property
    def shared_inputs(self) -> bool:
        """True when every source labelled exactly the same items."""
        return bool((self.labelled == self.labelled[0]).all())

    def source_labels(self, index: int) -> SourceLabels:
        """Source ``index``'s sparse labels."""
        return self.sources[index]

    def source_costs(self, index: int) -> FloatArray:
        """``(m, K)`` cost array of ``R_i`` for source ``index``."""
        return private_costs(self.sources[index], self.n_items, self.n_classes)

    def global_costs(self, exclude: int | None = None) -> FloatArray:
        """``(m, K)`` cost array of ``R`` (or of ``R`` without source ``exclude``'s term).

        ``R`` is computed once per matrix; without source ``i`` it is
        ``R - w_i R_i`` by linearity, O(m K) instead of O(n m K).
        """
        totals = self._global_costs
        if exclude is None:
            return totals.copy()
        result: FloatArray = totals - self.source_weights[exclude] * self.source_costs(exclude)
        return result


def report_costs(matrix: LabelMatrix, index: int, report: np.ndarray) -> FloatArray:
    """``(m, K)`` cost array of source ``index``'s private risk if its labels were ``report``.

    Only items the source labelled count; ``report`` holds one class index per item.
    """
    own = matrix.sources[index]
    classes = np.asarray(report, dtype=np.int64)[own.items]
    lied = SourceLabels(own.source_id, own.items, classes, own.item_weights, own.weight, own.coverage)
    return private_costs(lied, matrix.n_items, matrix.n_classes)


def normalised_weights(source_weights: Mapping[str, float], present: Sequence[str]) -> FloatArray:
    """Registry weights of the sources ``present`` (sorted ids), normalised to sum 1.

    :raises UnknownReferenceError, WeightError: a source missing from the registry, or a
        weight that is not positive and finite.
    """
    missing = [s for s in present if s not in source_weights]
    if missing:
        raise UnknownReferenceError(f"sources missing from the registry: {', '.join(missing)}")
    raw_weights = np.array([float(source_weights[s]) for s in present])
    if not np.isfinite(raw_weights).all() or (raw_weights <= 0).any():
        bad = [s for s, w in zip(present, raw_weights) if not (np.isfinite(w) and w > 0)]
        raise WeightError(f"source weights must be positive and finite: {', '.join(bad)}")
    result: FloatArray = raw_weights / raw_weights.sum()
    return result


def sorted_items(items: "pd.DataFrame") -> tuple[np.ndarray, FloatArray]:
    """Item ids sorted (the code order of every array in the core) and their weights ``u_j``
    (1 where the table has no ``item_weight``).

    :raises WeightError: a weight that is not finite or is negative.
    """
    return _sorted_items(items)[:2]


def _sorted_items(items: "pd.DataFrame") -> tuple[np.ndarray, FloatArray, np.ndarray]:
    """(sorted ids, their weights, the stable permutation that sorts the table's rows)."""
    raw_ids = as_ids(items["item_id"])
    order = np.argsort(raw_ids, kind="stable")
    if "item_weight" in items.columns:
        weights = items["item_weight"].to_numpy(dtype=np.float64)[order]
    else:
        weights = np.ones(len(raw_ids))
    if not np.isfinite(weights).all() or (weights < 0).any():
        raise WeightError("item weights must be finite and non-negative")
    return raw_ids[order], weights, order


def build_label_matrix(
    labels: Labels,
    items: "pd.DataFrame",
    source_weights: Mapping[str, float],
    n_classes: int = 2,
) -> LabelMatrix:
    """Build a :class:`LabelMatrix` from every source's labels.

    :param labels: one :class:`SourceCodes` per source (item codes index the rows of
        ``items``), or the long table with columns ``item_id``, ``source_id``, ``label``;
        labels are class indices ``0 .. n_classes - 1`` (or bool when ``n_classes`` is 2);
        one label per (item, source); a source need not label every item.
    :param items: column ``item_id`` (unique) and optionally ``item_weight``.
    :param source_weights: registry weight ``w_i > 0`` of every source present.
    :param n_classes: ``K``, the number of classes.
    :raises NoSourcesError, NoItemsError, WeightError, UnknownReferenceError,
        ClassIndexError: on impossible inputs; nothing is guessed.

    >>> import numpy as np, pandas as pd
    >>> items = pd.DataFrame({"item_id": ["b", "a"]})
    >>> m = build_label_matrix([SourceCodes("t", np.array([1]), np.array([1])),
    ...                         SourceCodes("s", np.array([1, 0]), np.array([1, 0]))], items, {"s": 1.0, "t": 3.0})
    >>> m.source_ids, m.labels.tolist(), m.labelled.sum(axis=1).tolist(), m.source_weights.tolist()
    (('s', 't'), [[1, 0], [1, 0]], [2, 1], [0.25, 0.75])
    >>> long = pd.DataFrame({"item_id": ["a", "b", "a"], "source_id": ["s", "s", "t"], "label": [1, 0, 1]})
    >>> build_label_matrix(long, items, {"s": 1.0, "t": 3.0}).labels.tolist()
    [[1, 0], [1, 0]]
    """
    if len(items) == 0:
        raise NoItemsError("the items table has no rows")
    item_ids, item_weights, order = _sorted_items(items)
    if isinstance(labels, (list, tuple)):
        present, weights, dense_labels, labelled = _dense_from_codes(labels, order, source_weights, n_classes)
    else:
        present, weights, dense_labels, labelled = _dense_from_long(labels, item_ids, source_weights, n_classes)
    matrix = LabelMatrix(
        item_ids=item_ids,
        source_ids=tuple(present),
        labels=dense_labels,
        labelled=labelled,
        item_weights=item_weights,
        source_weights=weights,
        n_classes=n_classes,
    )
    empty = [s for s, c in zip(present, matrix.coverage_weight) if not c > 0]
    if empty:
        raise NoItemsError(f"sources labelled no item of positive weight: {', '.join(empty)}")
    return matrix


def _check_classes(classes: np.ndarray, n_classes: int, where: str) -> None:
    if len(classes) and (classes.min() < 0 or classes.max() >= n_classes):
        bad = int(np.flatnonzero((classes < 0) | (classes >= n_classes))[0])
        raise ClassIndexError(f"label {classes[bad]} in row {bad}{where} is not a class index 0..{n_classes - 1}")


Dense = tuple[list[str], FloatArray, np.ndarray, np.ndarray]  # sources, weights, labels, labelled


def _dense_from_codes(sources: Sequence[SourceCodes], order: np.ndarray, source_weights: Mapping[str, float], n_classes: int) -> Dense:
    """Sources sorted by id; each source's codes moved to the sorted items' columns."""
    present = sorted(str(s.source_id) for s in sources)
    if not present:
        raise NoSourcesError("no source labelled any item")
    if len(set(present)) < len(present):
        raise InputError("a source's labels are given twice")
    weights = normalised_weights(source_weights, present)
    column_of_row = np.empty(len(order), dtype=np.int64)
    column_of_row[order] = np.arange(len(order))
    shape = (len(present), len(order))
    dense_labels, labelled = np.zeros(shape, dtype=label_dtype(n_classes)), np.zeros(shape, dtype=bool)
    row_of = {source_id: i for i, source_id in enumerate(present)}
    for source in sources:
        codes = np.asarray(source.item_codes, dtype=np.int64)
        if len(codes) and (codes.min() < 0 or codes.max() >= len(order)):
            raise UnknownReferenceError(f"label of source {source.source_id!r} on an item code outside the items table")
        classes = np.asarray(source.labels)
        _check_classes(classes, n_classes, f" of source {source.source_id!r}")
        row, columns = row_of[str(source.source_id)], column_of_row[codes]
        dense_labels[row, columns] = classes.astype(dense_labels.dtype)
        labelled[row, columns] = True
    return present, weights, dense_labels, labelled


def _dense_from_long(labels: "pd.DataFrame", item_ids: np.ndarray, source_weights: Mapping[str, float], n_classes: int) -> Dense:
    """The long table's cells: one hash join for items, one dictionary encoding for sources."""
    encoded = pc.dictionary_encode(id_array(labels["source_id"]))
    source_names = encoded.dictionary.to_pylist()
    present = sorted(str(s) for s in source_names)
    if not present:
        raise NoSourcesError("no source labelled any item")
    weights = normalised_weights(source_weights, present)
    label_items = id_array(labels["item_id"])
    found = pc.index_in(label_items, value_set=pa.array(item_ids, pa.string()))
    if found.null_count:
        unknown = label_items.filter(found.is_null())[0].as_py()
        raise UnknownReferenceError(f"label on unknown item {unknown!r}")
    columns = found.to_numpy(zero_copy_only=False)
    rank = np.searchsorted(np.array(present), np.array(source_names, dtype=str))
    rows = rank[encoded.indices.to_numpy(zero_copy_only=False)]

    shape = (len(present), len(item_ids))
    dense_labels = np.zeros(shape, dtype=label_dtype(n_classes))
    labelled = np.zeros(shape, dtype=bool)
    classes = labels["label"].to_numpy()  # no copy: 10M labels stay one small-integer pass
    _check_classes(classes, n_classes, "")
    dense_labels[rows, columns] = classes.astype(dense_labels.dtype)
    labelled[rows, columns] = True
    return present, weights, dense_labels, labelled
