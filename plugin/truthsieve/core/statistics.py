"""Sufficient statistics of a night: per-item class costs summed over sources, and one source's labels.

Every risk is linear in a rule's predictions, so it is carried as a cost array
``costs`` of shape ``(m, K)``: ``costs[j, k]`` is what predicting class ``k`` on item
``j`` adds to the risk. Source ``i`` with labels ``y_ij`` on its items ``S_i``, item
weights ``u_j``, coverage ``U_i = sum_{j in S_i} u_j`` and normalised weight ``w_i``
contributes

    private costs    c_i[j, k] = u_j / U_i          if j in S_i and k != y_ij, else 0
    global term      w_i c_i[j, k]  (computed as u_j * (w_i / U_i))

The consensus fit needs only ``totals = sum_i w_i c_i`` (an ``(m, K)`` float64 array);
the dictators need each source's own labels (for its own ERM); one source's incentive
analysis needs ``totals`` and its own labels, since the others' costs are
``totals - w_i c_i`` by linearity. No step needs the dense source x item matrix, and
the work per source is proportional to ``K |S_i|``.

Sums run in source order from zeros, one source at a time, so a night summed from
per-source statistics gives the same floats as the whole-night loop.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]


@dataclass(frozen=True, eq=False)
class SourceLabels:
    """One source's labels, sparse: all that its private risk and its global term need.

    :param source_id: the source's id.
    :param items: item codes (positions in the night's sorted items), increasing, unique.
    :param classes: the source's class index on each of those items (int8 when every
        index fits, as with up to 128 classes; compute offsets from them in int64).
    :param item_weights: ``u_j`` on those items (read-only; one shared 1.0 for unit weights).
    :param weight: normalised source weight ``w_i`` (over the sources present).
    :param coverage: ``U_i = sum u_j`` over the source's items.
    """

    source_id: str
    items: IntArray
    classes: IntArray
    item_weights: FloatArray
    weight: float
    coverage: float

    @property
    def shares(self) -> FloatArray:
        """``u_j / U_i`` per own item: what a wrong prediction there adds to ``R_i``."""
        result: FloatArray = self.item_weights / self.coverage
        return result

    @property
    def contribution(self) -> FloatArray:
        """``u_j * (w_i / U_i)`` per own item: what a wrong prediction adds to ``R``."""
        result: FloatArray = self.item_weights * (self.weight / self.coverage)
        return result

    def sparse_costs(self, n_classes: int) -> FloatArray:
        """``(|S_i|, K)`` private costs on the source's own items (rows follow ``items``)."""
        return class_costs(self.classes, self.shares, n_classes)


def source_statistics(
    source_id: str,
    items: npt.ArrayLike,
    classes: npt.ArrayLike,
    item_weights: npt.ArrayLike,
    weight: float,
) -> SourceLabels:
    """One source's :class:`SourceLabels` from its item codes, classes and the night's weights.

    :param items: item codes of the source's labels (any order; sorted here).
    :param classes: class index of each label, aligned with ``items``.
    :param item_weights: the night's item weights ``u`` (all ``m`` items, in code order).
    :param weight: the source's normalised weight ``w_i``.
    """
    codes = np.asarray(items, dtype=np.int64)
    order = np.argsort(codes, kind="stable")
    codes = codes[order]
    own_weights = np.asarray(item_weights, dtype=np.float64)[codes]
    coverage = float(own_weights.sum())
    if len(own_weights) and (own_weights == 1.0).all():
        # Unit weights (no item_weight column): one shared read-only 1.0, the same floats
        # in every sum and product, 8 bytes per label less.
        own_weights = np.broadcast_to(np.float64(1.0), own_weights.shape)
    values = np.asarray(classes)[order]
    small = len(values) == 0 or (values.min() >= 0 and values.max() <= np.iinfo(np.int8).max)
    return SourceLabels(
        source_id=source_id,
        items=codes,
        classes=values.astype(np.int8 if small else np.int64),  # class indices, as small as they fit
        item_weights=own_weights,
        weight=float(weight),
        coverage=coverage,
    )


def class_costs(classes: IntArray, shares: FloatArray, n_classes: int) -> FloatArray:
    """``out[p, k] = shares[p]`` where ``k != classes[p]``, else 0."""
    out = np.repeat(shares[:, np.newaxis], n_classes, axis=1)
    out[np.arange(len(classes)), classes] = 0.0
    return out


def private_costs(source: SourceLabels, n_items: int, n_classes: int) -> FloatArray:
    """Dense ``(m, K)`` private costs of the source (zero off its items)."""
    out = np.zeros((n_items, n_classes))
    out[source.items] = source.sparse_costs(n_classes)
    return out


def add_contribution(totals: FloatArray, source: SourceLabels) -> None:
    """``totals += w_i c_i`` in place, one class column at a time (O(K |S_i|))."""
    share = source.contribution
    for k in range(totals.shape[1]):
        wrong = source.classes != k
        totals[source.items[wrong], k] += share[wrong]


def sum_statistics(sources: Sequence[SourceLabels], n_items: int, n_classes: int) -> FloatArray:
    """``totals = sum_i w_i c_i``: the ``(m, K)`` global costs, summed in the given order."""
    totals = np.zeros((n_items, n_classes))
    for source in sources:
        add_contribution(totals, source)
    return totals


def others_costs(totals: FloatArray, source: SourceLabels) -> FloatArray:
    """Global costs without ``source``'s term: ``totals - w_i c_i`` (linearity)."""
    own = private_costs(source, totals.shape[0], totals.shape[1])
    result: FloatArray = totals - source.weight * own
    return result


def shared_inputs(sources: Sequence[SourceLabels]) -> bool:
    """True when every source labelled exactly the same items."""
    return all(np.array_equal(s.items, sources[0].items) for s in sources[1:])


def risk_is_zero(value: float) -> bool:
    """Risks are sums of non-negative floats in [0, 1]; below this they count as 0."""
    return abs(value) <= TIE_TOLERANCE


# Two risks closer than this are tied; float rounding in prefix sums over a million
# items stays orders of magnitude below it (common practice for float comparisons).
TIE_TOLERANCE = 1e-10


def label_dtype(n_classes: int) -> type[np.signedinteger]:
    """The smallest integer type of class indices ``0 .. K-1``: int8 up to 127 classes, else int16."""
    return np.int8 if n_classes <= 127 else np.int16
