"""Turn the long label table into the arrays the core computes on.

Labels travel as a long table (``item_id``, ``source_id``, ``label``) everywhere
outside the core; :func:`build_label_matrix` is the one place that turns them into
dense arrays. Items and sources are sorted by id, so the result does not depend on
the order of rows in any input.

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
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from truthsieve.core.statistics import FloatArray, SourceLabels, private_costs, source_statistics, sum_statistics
from truthsieve.exceptions import ClassIndexError, NoItemsError, NoSourcesError, UnknownReferenceError, WeightError


@dataclass(frozen=True)
class LabelMatrix:
    """Dense labels of ``n`` sources on ``m`` shared items.

    The dense ``(n, m)`` arrays serve the statistics that need every label at once
    (reliability, agreement); the fit and the per-source analysis use only
    :meth:`global_costs` and :meth:`source_labels`.

    :param item_ids: sorted item ids, shape ``(m,)``.
    :param source_ids: sorted source ids, length ``n``.
    :param labels: ``(n, m)`` int8 array of class indices (0 where not labelled).
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


def sorted_items(items: pd.DataFrame) -> tuple[np.ndarray, FloatArray]:
    """Item ids sorted (the code order of every array in the core) and their weights ``u_j``
    (1 where the table has no ``item_weight``).

    :raises WeightError: a weight that is not finite or is negative.
    """
    raw_ids = as_ids(items["item_id"])
    order = np.argsort(raw_ids, kind="stable")
    if "item_weight" in items.columns:
        weights = items["item_weight"].to_numpy(dtype=np.float64)[order]
    else:
        weights = np.ones(len(raw_ids))
    if not np.isfinite(weights).all() or (weights < 0).any():
        raise WeightError("item weights must be finite and non-negative")
    return raw_ids[order], weights


def build_label_matrix(
    labels: pd.DataFrame,
    items: pd.DataFrame,
    source_weights: Mapping[str, float],
    n_classes: int = 2,
) -> LabelMatrix:
    """Build a :class:`LabelMatrix` from the long label table.

    :param labels: columns ``item_id``, ``source_id``, ``label`` (class index
        ``0 .. n_classes - 1``, or bool when ``n_classes`` is 2); one row per
        (item, source); a source need not label every item.
    :param items: column ``item_id`` (unique) and optionally ``item_weight``.
    :param source_weights: registry weight ``w_i > 0`` of every source present.
    :param n_classes: ``K``, the number of classes.
    :raises NoSourcesError, NoItemsError, WeightError, UnknownReferenceError,
        ClassIndexError: on impossible inputs; nothing is guessed.

    >>> import pandas as pd
    >>> m = build_label_matrix(
    ...     pd.DataFrame({"item_id": ["a", "b", "a"], "source_id": ["s", "s", "t"], "label": [1, 0, 1]}),
    ...     pd.DataFrame({"item_id": ["a", "b"]}), {"s": 1.0, "t": 3.0})
    >>> m.source_weights.tolist(), m.labelled.sum(axis=1).tolist()
    ([0.25, 0.75], [2, 1])
    """
    if len(items) == 0:
        raise NoItemsError("the items table has no rows")
    item_ids, item_weights = sorted_items(items)

    # Ids stay in Arrow (no Python string per label): one hash join for items, one
    # dictionary encoding for sources.
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
    dense_labels = np.zeros(shape, dtype=np.int8)
    labelled = np.zeros(shape, dtype=bool)
    classes = labels["label"].to_numpy()  # no copy: 10M labels stay one int8 pass
    if len(classes) and (classes.min() < 0 or classes.max() >= n_classes):
        bad = int(np.flatnonzero((classes < 0) | (classes >= n_classes))[0])
        raise ClassIndexError(f"label {classes[bad]} in row {bad} is not a class index 0..{n_classes - 1}")
    dense_labels[rows, columns] = classes.astype(np.int8)
    labelled[rows, columns] = True

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


def id_array(values: Any) -> pa.Array:
    """Ids as one Arrow string array: from an Arrow column, a pandas column or index, or a list."""
    if not isinstance(values, (pa.Array, pa.ChunkedArray)):
        try:
            values = pa.array(values)
        except (pa.ArrowException, TypeError, ValueError):
            values = pa.array(np.asarray(values, dtype=object).astype(str))
    if isinstance(values, pa.ChunkedArray):  # pandas' Arrow-backed columns come chunked
        values = values.combine_chunks()
    if values.type != pa.string():
        values = values.cast(pa.string())
    return values


def as_ids(values: Any) -> np.ndarray:
    """Ids as a NumPy unicode array: sorts and compares in C, whatever pandas' string dtype."""
    return np.asarray(values, dtype=object).astype(str)


def risk_is_zero(value: float) -> bool:
    """Risks are sums of non-negative floats in [0, 1]; below this they count as 0."""
    return abs(value) <= TIE_TOLERANCE


# Two risks closer than this are tied; float rounding in prefix sums over a million
# items stays orders of magnitude below it (common practice for float comparisons).
TIE_TOLERANCE = 1e-10
