"""Rule classes over ``K`` classes with exact empirical risk minimisation (ERM).

A rule class is a finite, ordered list of rules, each giving every item one class
``0 .. K-1``. Every risk in truthsieve is linear in a rule's predictions (see
:mod:`truthsieve.core.statistics`), so one primitive serves all of them:
:meth:`RuleClass.risks` maps an ``(m, K)`` cost array to the risk of *every* rule of
the class at once, ``risk(r) = sum_j costs[j, r(x_j)]``. ERM is then the first rule,
in the class's listed order, whose risk is within :data:`TIE_TOLERANCE` of the minimum.
That order is the documented deterministic tie-break, and it depends only on the
items, never on anyone's labels.

Orders (tie-break, earliest wins):

* ``constant``: all-0, all-1, ..., all-(K-1): with two classes ties resolve to the
  cautious label 0 (reject).
* ``threshold``: the ``K`` constant rules, then per configured feature (in configured
  order) each cut in increasing order, and per cut the ``K (K - 1)`` pairs
  ``(above, below)``, ``above != below``, in lexicographic order. With ``K = 2`` that is
  ``(0, 1)`` then ``(1, 0)``: first ``above=0``, then ``above=1``, as before classes.
* ``listed``: the ``rule__<name>`` columns sorted by name.

For ``threshold``, each feature is sorted once when the class is built and every item
gets its cut bin (how many cuts lie below it). With ``Δ_k(b) = sum_{j below cut k}
(costs[j, b] - costs[j, 0])`` (``Δ_k(0) = 0``, one ``bincount`` and prefix sum per
class ``b >= 1``) and ``T(a) = sum_j costs[j, a]``, the rule ``(cut k, above a,
below b)`` costs ``α_k(a) + Δ_k(b)`` with ``α_k(a) = T(a) - Δ_k(a)`` (for ``b = 0``
just ``α_k(a)``; for ``K = 2`` these are exactly the former ``T(0) + B_k`` and
``T(1) - B_k``). All risks: O(d m K + cuts K²). ERM (:meth:`ThresholdRules.fit`) never
lists the pairs: floating-point addition is monotone in each argument, so per cut only
the best and second-best ``above`` and ``below`` matter, O(d m K) in all, and the
first rule within the tolerance of the minimum is found cut by cut in the same order.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import pandas as pd

from truthsieve.core.labels import TIE_TOLERANCE
from truthsieve.core.statistics import FloatArray, IntArray
from truthsieve.exceptions import ClassIndexError, RuleClassError

RULE_COLUMN_PREFIX = "rule__"
RuleForm = dict[str, Any]


class RuleClass:
    """Base class: a finite ordered list of rules over ``m`` items and ``K`` classes."""

    kind: str = ""
    size: int = 0
    n_classes: int = 2

    def risks(self, costs: FloatArray) -> FloatArray:
        """Risk of every rule, in the class's order, for the ``(m, K)`` cost array."""
        # Sums of non-negative costs can round a zero risk to -1e-17.
        out = self.linear_risks(costs)
        return np.maximum(out, 0.0, out=out)

    def linear_risks(self, costs: FloatArray, items: IntArray | None = None) -> FloatArray:
        """``sum_j costs[j, r(x_j)]`` for every rule ``r``, unclipped.

        Linear in the costs, so it also scores a *change* of costs (entries may be
        negative). With ``items`` given, ``costs`` has one row per item position in
        ``items`` (zero elsewhere) and the work is proportional to ``len(items)``, not
        to ``m``.
        """
        raise NotImplementedError

    def predict(self, index: int, items: IntArray | None = None) -> IntArray:
        """Classes (one per item) of rule ``index``; on ``items`` only when given."""
        raise NotImplementedError

    def describe(self, index: int) -> RuleForm:
        """The contract's JSON form of rule ``index``."""
        raise NotImplementedError

    def fit_with_risk(self, costs: FloatArray, items: IntArray | None = None) -> tuple[int, float]:
        """Exact ERM and its (clipped) risk: the first rule of minimal risk."""
        risks = np.maximum(self.linear_risks(costs, items), 0.0)
        best = first_minimum(risks)
        return best, float(risks[best])

    def fit(self, costs: FloatArray, items: IntArray | None = None) -> int:
        """Exact ERM: index of the first rule of minimal risk."""
        return self.fit_with_risk(costs, items)[0]


def first_minimum(risks: FloatArray) -> int:
    """Index of the first entry within :data:`TIE_TOLERANCE` of the minimum."""
    return int(np.flatnonzero(risks <= risks.min() + TIE_TOLERANCE)[0])


def class_totals(costs: FloatArray) -> FloatArray:
    """``T(k) = sum_j costs[j, k]``, one contiguous column at a time."""
    return np.array([np.ascontiguousarray(costs[:, k]).sum() for k in range(costs.shape[1])], dtype=np.float64)


class ConstantRules(RuleClass):
    """The ``K`` constant rules: label everything ``k``."""

    kind = "constant"

    def __init__(self, n_items: int, n_classes: int = 2) -> None:
        self.n_items = n_items
        self.n_classes = n_classes
        self.size = n_classes

    def linear_risks(self, costs: FloatArray, items: IntArray | None = None) -> FloatArray:
        return class_totals(np.asarray(costs, dtype=np.float64))

    def predict(self, index: int, items: IntArray | None = None) -> IntArray:
        return np.full(self.n_items if items is None else len(items), int(index), dtype=np.int64)

    def describe(self, index: int) -> RuleForm:
        return {"kind": "constant", "label": int(index)}


@dataclass(frozen=True)
class _SortedFeature:
    name: str
    order: IntArray  # item positions in increasing feature value
    split_after: IntArray  # k: a cut lies between sorted positions k-1 and k
    cuts: FloatArray  # midpoints, increasing
    values: FloatArray  # the feature, in item order
    bins: npt.NDArray[np.int32]  # per item (item order): how many cuts lie below its value


def ordered_pairs(n_classes: int) -> IntArray:
    """``(above, below)`` with ``above != below``, lexicographic: shape ``(K (K-1), 2)``."""
    return np.array([(a, b) for a in range(n_classes) for b in range(n_classes) if a != b], dtype=np.int64)


class ThresholdRules(RuleClass):
    """One feature, one cut: ``x > cut`` gets class ``above``, the rest class ``below``.

    Cuts are midpoints between consecutive distinct observed values; the ``K``
    constant rules are members too (indices ``0 .. K-1``).
    """

    kind = "threshold"

    def __init__(self, features: pd.DataFrame, n_classes: int = 2) -> None:
        self.n_items = len(features)
        self.n_classes = n_classes
        self.pairs = ordered_pairs(n_classes)
        self.features: list[_SortedFeature] = []
        for name in features.columns:
            values = features[name].to_numpy(dtype=np.float64)
            order = np.argsort(values, kind="stable")
            ordered = values[order]
            split_after = np.flatnonzero(ordered[1:] > ordered[:-1]) + 1
            if len(split_after) == 0:
                continue
            low, high = ordered[split_after - 1], ordered[split_after]
            # low + (high - low) / 2 cannot overflow; between adjacent floats it may round
            # up to high, and then low itself is the cut that separates the two.
            cuts = low + (high - low) / 2.0
            cuts = np.where(cuts < high, cuts, low)
            # The item at sorted position p lies above cut k iff split_after[k] <= p.
            bins = np.empty(len(values), dtype=np.int32)
            bins[order] = np.searchsorted(split_after, np.arange(len(values)), side="right")
            self.features.append(_SortedFeature(str(name), order, split_after, cuts, values, bins))
        if not self.features:
            raise RuleClassError(
                "threshold class has no usable feature: every configured feature is "
                "constant across the items"
            )
        per_cut = len(self.pairs)
        self.offsets = np.cumsum([n_classes] + [per_cut * len(f.cuts) for f in self.features])
        self.size = int(self.offsets[-1])

    def _parts(
        self, costs: FloatArray, items: IntArray | None
    ) -> tuple[FloatArray, list[tuple[FloatArray, FloatArray]]]:
        """``T`` and, per feature, ``(α, Δ)`` of shape ``(cuts, K)`` (``Δ[:, 0] = 0``)."""
        costs = np.asarray(costs, dtype=np.float64)
        totals = class_totals(costs)
        difference = costs[:, 1:] - costs[:, :1]
        parts = []
        for feature in self.features:
            n_cuts = len(feature.cuts)
            bins = feature.bins if items is None else feature.bins[items]
            delta = np.zeros((n_cuts, self.n_classes))
            for b in range(1, self.n_classes):
                column = np.ascontiguousarray(difference[:, b - 1])
                delta[:, b] = np.cumsum(np.bincount(bins, weights=column, minlength=n_cuts + 1)[:n_cuts])
            alpha = np.empty((n_cuts, self.n_classes))
            alpha[:, 0] = totals[0]
            alpha[:, 1:] = totals[1:] - delta[:, 1:]
            parts.append((alpha, delta))
        return totals, parts

    @staticmethod
    def _pair_risks(alpha: FloatArray, delta: FloatArray, above: IntArray, below: IntArray) -> FloatArray:
        # b = 0 adds nothing (Δ(0) = 0), so K = 2 keeps the former floats exactly.
        out: FloatArray = np.where(below == 0, alpha[:, above], alpha[:, above] + delta[:, below])
        return out

    def linear_risks(self, costs: FloatArray, items: IntArray | None = None) -> FloatArray:
        totals, parts = self._parts(costs, items)
        out = np.empty(self.size)
        out[: self.n_classes] = totals
        above, below = self.pairs[:, 0], self.pairs[:, 1]
        for (alpha, delta), start, stop in zip(parts, self.offsets[:-1], self.offsets[1:]):
            out[start:stop] = self._pair_risks(alpha, delta, above, below).ravel()
        return out

    def fit_with_risk(self, costs: FloatArray, items: IntArray | None = None) -> tuple[int, float]:
        """Exact ERM without listing the pairs: per cut the best pair is (best ``above``,
        best ``below``) unless both are the same class, and then the better of (best,
        second ``below``) and (second ``above``, best). Same result as the first
        minimum of :meth:`risks`, tie-break included."""
        totals, parts = self._parts(costs, items)
        best_per_feature = [self._best_pair_values(alpha, delta) for alpha, delta in parts]
        minimum = max(min([float(totals.min())] + [float(b.min()) for b in best_per_feature]), 0.0)
        limit = minimum + TIE_TOLERANCE
        if (totals <= limit).any():
            k = int(np.flatnonzero(totals <= limit)[0])
            return k, float(np.maximum(totals[k], 0.0))
        for (alpha, delta), best, start in zip(parts, best_per_feature, self.offsets[:-1]):
            hits = np.flatnonzero(best <= limit)
            if len(hits) == 0:
                continue
            cut = int(hits[0])
            values = self._pair_risks(alpha[cut : cut + 1], delta[cut : cut + 1], self.pairs[:, 0], self.pairs[:, 1])[0]
            position = int(np.flatnonzero(values <= limit)[0])
            return int(start) + cut * len(self.pairs) + position, float(np.maximum(values[position], 0.0))
        raise AssertionError("unreachable: the minimum is attained by some rule")

    def _best_pair_values(self, alpha: FloatArray, delta: FloatArray) -> FloatArray:
        """``min_{a != b} risk(a, b)`` per cut, O(cuts K)."""
        rows = np.arange(len(alpha))
        order_a = np.argsort(alpha, axis=1, kind="stable")[:, :2]
        order_b = np.argsort(delta, axis=1, kind="stable")[:, :2]
        a1, a2, b1, b2 = order_a[:, 0], order_a[:, 1], order_b[:, 0], order_b[:, 1]

        def risk(a: IntArray, b: IntArray) -> FloatArray:
            out: FloatArray = np.where(b == 0, alpha[rows, a], alpha[rows, a] + delta[rows, b])
            return out

        distinct = risk(a1, b1)
        same = np.minimum(risk(a1, b2), risk(a2, b1))
        result: FloatArray = np.where(a1 != b1, distinct, same)
        return result

    def locate(self, index: int) -> tuple[_SortedFeature, int, int, int]:
        """(feature, cut position, above class, below class) of a non-constant rule."""
        block = int(np.searchsorted(self.offsets, index, side="right")) - 1
        feature = self.features[block]
        position, pair = divmod(index - int(self.offsets[block]), len(self.pairs))
        return feature, position, int(self.pairs[pair, 0]), int(self.pairs[pair, 1])

    def predict(self, index: int, items: IntArray | None = None) -> IntArray:
        if index < self.n_classes:
            return np.full(self.n_items if items is None else len(items), int(index), dtype=np.int64)
        feature, position, above, below = self.locate(index)
        values = feature.values if items is None else feature.values[items]
        return np.where(values > feature.cuts[position], above, below).astype(np.int64)

    def describe(self, index: int) -> RuleForm:
        if index < self.n_classes:
            return {"kind": "constant", "label": int(index)}
        feature, position, above, below = self.locate(index)
        cut = float(feature.cuts[position])
        return {"kind": "threshold", "feature": feature.name, "cut": cut, "above": above, "below": below}


class ListedRules(RuleClass):
    """A finite set of candidate rules given as item columns ``rule__<name>`` of class
    indices (bool with two classes)."""

    kind = "listed"

    def __init__(self, rules: pd.DataFrame, n_classes: int = 2) -> None:
        if rules.shape[1] == 0:
            raise RuleClassError(f"listed class has no rules: no column starts with {RULE_COLUMN_PREFIX!r}")
        names = sorted(rules.columns)
        self.names = [name[len(RULE_COLUMN_PREFIX):] for name in names]
        self.n_classes = n_classes
        raw = rules[names].to_numpy()
        self.table = raw.astype(np.int64)
        outside = (self.table < 0) | (self.table >= n_classes) | (raw != self.table)
        if outside.any():
            row, column = (int(v[0]) for v in np.nonzero(outside))
            raise ClassIndexError(
                f"listed rule column {names[column]!r} holds {np.asarray(raw[row, column]).item()!r} in row {row}, "
                f"not a class index 0..{n_classes - 1}"
            )
        # One indicator per class k >= 1; with two classes the former boolean table.
        self.indicators = [self.table == k for k in range(1, n_classes)]
        self.size = len(names)

    def linear_risks(self, costs: FloatArray, items: IntArray | None = None) -> FloatArray:
        """``T(0) + sum_{k >= 1} (costs[:, k] - costs[:, 0]) @ [r = k]``."""
        costs = np.asarray(costs, dtype=np.float64)
        base = costs[:, 0]
        out: FloatArray = class_totals(costs[:, :1])[0] + np.zeros(self.size)
        for k, indicator in enumerate(self.indicators, start=1):
            table = indicator if items is None else indicator[items]
            out = out + (costs[:, k] - base) @ table
        return out

    def predict(self, index: int, items: IntArray | None = None) -> IntArray:
        column: IntArray = self.table[:, index].copy() if items is None else self.table[items, index]
        return column

    def describe(self, index: int) -> RuleForm:
        return {"kind": "listed", "name": self.names[index]}


RULE_CLASS_KINDS = ("constant", "threshold", "listed")


def build_rule_class(
    kind: str, items: pd.DataFrame, item_ids: np.ndarray, features: Sequence[str] = (), n_classes: int = 2
) -> RuleClass:
    """Build the rule class ``kind`` over the items, aligned to ``item_ids``.

    :param items: the items table (``item_id``, features, ``rule__*`` columns).
    :param item_ids: the order of items in the label matrix.
    :param features: the threshold class's features, in tie-break order.
    :param n_classes: ``K``, the number of classes.
    :raises RuleClassError: unknown kind, missing or unusable features, no listed rules.
    :raises ClassIndexError: a listed rule column holds a value outside ``0 .. K-1``.
    """
    aligned = items.set_index(items["item_id"].astype(str)).reindex(item_ids)
    if kind == "constant":
        return ConstantRules(len(item_ids), n_classes)
    if kind == "threshold":
        if not features:
            raise RuleClassError("threshold class needs at least one feature")
        absent = [f for f in features if f not in aligned.columns]
        if absent:
            raise RuleClassError(f"threshold features not in the items table: {', '.join(absent)}")
        return ThresholdRules(aligned[list(features)], n_classes)
    if kind == "listed":
        columns = [c for c in aligned.columns if str(c).startswith(RULE_COLUMN_PREFIX)]
        return ListedRules(aligned[columns], n_classes)
    raise RuleClassError(f"unknown rule class {kind!r}; expected one of {', '.join(RULE_CLASS_KINDS)}")
