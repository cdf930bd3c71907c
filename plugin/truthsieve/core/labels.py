"""Turn the long label table into the arrays the core computes on.

Labels travel as a long table (``item_id``, ``source_id``, ``label``) everywhere
outside the core; :func:`build_label_matrix` is the one place that turns them into
dense arrays. Items and sources are sorted by id, so the result does not depend on
the order of rows in any input.

Definitions (see the contract): source ``i`` labelled the items ``S_i`` with labels
``y_ij``; item ``j`` has weight ``u_j >= 0``; the private risk of a rule ``c`` is

    R_i(c) = sum_{j in S_i} u_j [c(x_j) != y_ij] / sum_{j in S_i} u_j

and the global risk is ``R(c) = sum_i w_i R_i(c)`` with normalised weights ``w_i``.
Both are linear in the rule's predictions, so each is carried as two cost vectors:
``cost0[j]`` is what predicting 0 on item ``j`` adds to the risk, ``cost1[j]`` what
predicting 1 adds.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from truthsieve.exceptions import NoItemsError, NoSourcesError, UnknownReferenceError, WeightError


@dataclass(frozen=True)
class LabelMatrix:
    """Dense labels of ``n`` sources on ``m`` shared items.

    :param item_ids: sorted item ids, shape ``(m,)``.
    :param source_ids: sorted source ids, length ``n``.
    :param labels: ``(n, m)`` int8 array of 0/1 labels (0 where not labelled).
    :param labelled: ``(n, m)`` bool array, True where source ``i`` labelled item ``j``.
    :param item_weights: ``(m,)`` item weights ``u_j``.
    :param source_weights: ``(n,)`` normalised source weights (sum to 1).
    """

    item_ids: np.ndarray
    source_ids: tuple[str, ...]
    labels: np.ndarray
    labelled: np.ndarray
    item_weights: np.ndarray
    source_weights: np.ndarray

    @property
    def n_sources(self) -> int:
        return len(self.source_ids)

    @property
    def n_items(self) -> int:
        return len(self.item_ids)

    @cached_property
    def coverage_weight(self) -> np.ndarray:
        """``sum_{j in S_i} u_j`` per source: the denominator of ``R_i`` (computed once)."""
        # Row by row: no (n, m) float temporary.
        return np.array([self.item_weights[row].sum() for row in self.labelled], dtype=np.float64)

    @cached_property
    def _global_costs(self) -> tuple[np.ndarray, np.ndarray]:
        # Sum over sources of w_i / U_i * u_j on each source's own items, O(sum_i |S_i|).
        cost0, cost1 = np.zeros(self.n_items), np.zeros(self.n_items)
        for i in range(self.n_sources):
            items = np.flatnonzero(self.labelled[i])
            share = self.item_weights[items] * (self.source_weights[i] / self.coverage_weight[i])
            positive = self.labels[i, items].astype(bool)
            cost0[items[positive]] += share[positive]
            cost1[items[~positive]] += share[~positive]
        return cost0, cost1

    @property
    def shared_inputs(self) -> bool:
        """True when every source labelled exactly the same items."""
        return bool((self.labelled == self.labelled[0]).all())

    def source_costs(self, index: int) -> tuple[np.ndarray, np.ndarray]:
        """Cost vectors of ``R_i`` for source ``index``."""
        return report_costs(self, index, self.labels[index])

    def global_costs(self, exclude: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Cost vectors of ``R`` (or of ``R`` without source ``exclude``'s term).

        ``R`` is computed once per matrix; without source ``i`` it is
        ``R - w_i R_i`` by linearity, O(m) instead of O(n m).
        """
        cost0, cost1 = self._global_costs
        if exclude is None:
            return cost0.copy(), cost1.copy()
        own0, own1 = self.source_costs(exclude)
        weight = self.source_weights[exclude]
        return cost0 - weight * own0, cost1 - weight * own1


def report_costs(matrix: LabelMatrix, index: int, report: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cost vectors of source ``index``'s private risk if its labels were ``report``.

    Only items the source labelled count; ``report`` is read as 0/1 on them.
    """
    share = np.where(matrix.labelled[index], matrix.item_weights, 0.0) / matrix.coverage_weight[index]
    positive = np.asarray(report).astype(bool)
    return np.where(positive, share, 0.0), np.where(positive, 0.0, share)


def build_label_matrix(
    labels: pd.DataFrame,
    items: pd.DataFrame,
    source_weights: Mapping[str, float],
) -> LabelMatrix:
    """Build a :class:`LabelMatrix` from the long label table.

    :param labels: columns ``item_id``, ``source_id``, ``label`` (bool or 0/1); one row
        per (item, source); a source need not label every item.
    :param items: column ``item_id`` (unique) and optionally ``item_weight``.
    :param source_weights: registry weight ``w_i > 0`` of every source present.
    :raises NoSourcesError, NoItemsError, WeightError, UnknownReferenceError: on
        impossible inputs; nothing is guessed.

    >>> import pandas as pd
    >>> m = build_label_matrix(
    ...     pd.DataFrame({"item_id": ["a", "b", "a"], "source_id": ["s", "s", "t"], "label": [1, 0, 1]}),
    ...     pd.DataFrame({"item_id": ["a", "b"]}), {"s": 1.0, "t": 3.0})
    >>> m.source_weights.tolist(), m.labelled.sum(axis=1).tolist()
    ([0.25, 0.75], [2, 1])
    """
    if len(items) == 0:
        raise NoItemsError("the items table has no rows")
    raw_ids = as_ids(items["item_id"])
    order = np.argsort(raw_ids, kind="stable")
    item_ids = raw_ids[order]
    if "item_weight" in items.columns:
        item_weights = items["item_weight"].to_numpy(dtype=np.float64)[order]
    else:
        item_weights = np.ones(len(item_ids))
    if not np.isfinite(item_weights).all() or (item_weights < 0).any():
        raise WeightError("item weights must be finite and non-negative")

    # Ids stay in Arrow (no Python string per label): one hash join for items, one
    # dictionary encoding for sources.
    encoded = pc.dictionary_encode(id_array(labels["source_id"]))
    source_names = encoded.dictionary.to_pylist()
    present = sorted(str(s) for s in source_names)
    if not present:
        raise NoSourcesError("no source labelled any item")
    missing = [s for s in present if s not in source_weights]
    if missing:
        raise UnknownReferenceError(f"sources missing from the registry: {', '.join(missing)}")
    raw_weights = np.array([float(source_weights[s]) for s in present])
    if not np.isfinite(raw_weights).all() or (raw_weights <= 0).any():
        bad = [s for s, w in zip(present, raw_weights) if not (np.isfinite(w) and w > 0)]
        raise WeightError(f"source weights must be positive and finite: {', '.join(bad)}")

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
    dense_labels[rows, columns] = labels["label"].to_numpy().astype(np.int8)
    labelled[rows, columns] = True

    matrix = LabelMatrix(
        item_ids=item_ids,
        source_ids=tuple(present),
        labels=dense_labels,
        labelled=labelled,
        item_weights=item_weights,
        source_weights=raw_weights / raw_weights.sum(),
    )
    empty = [s for s, c in zip(present, matrix.coverage_weight) if not c > 0]
    if empty:
        raise NoItemsError(f"sources labelled no item of positive weight: {', '.join(empty)}")
    return matrix


def id_array(values) -> pa.Array:
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


def as_ids(values) -> np.ndarray:
    """Ids as a NumPy unicode array: sorts and compares in C, whatever pandas' string dtype."""
    return np.asarray(values, dtype=object).astype(str)


def risk_is_zero(value: float) -> bool:
    """Risks are sums of non-negative floats in [0, 1]; below this they count as 0."""
    return abs(value) <= TIE_TOLERANCE


# Two risks closer than this are tied; float rounding in prefix sums over a million
# items stays orders of magnitude below it (common practice for float comparisons).
TIE_TOLERANCE = 1e-10
