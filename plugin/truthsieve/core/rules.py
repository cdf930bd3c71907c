"""Rule classes with exact empirical risk minimisation (ERM).

A rule class is a finite, ordered list of rules. Every risk in truthsieve is linear
in a rule's predictions (see :mod:`truthsieve.core.labels`), so one primitive serves
all of them: :meth:`RuleClass.risks` maps the cost vectors ``(cost0, cost1)`` to the
risk of *every* rule of the class at once. ERM is then the first rule, in the class's
listed order, whose risk is within :data:`TIE_TOLERANCE` of the minimum. That order is
the documented deterministic tie-break, and it depends only on the items, never on
anyone's labels.

Orders (tie-break, earliest wins):

* ``constant``: all-0 (reject), then all-1 (accept): ties resolve to the cautious label.
* ``threshold``: the two constant rules, then per configured feature (in configured
  order) each cut in increasing order, first ``above=0`` then ``above=1``.
* ``listed``: the ``rule__<name>`` columns sorted by name.

For ``threshold``, each feature is sorted once when the class is built and every item
gets its cut bin (how many cuts lie below it); after that a fit over all
``2 + 2 * sum_f (distinct_f - 1)`` rules is one ``bincount`` and one prefix sum per
feature, O(d * m), and scoring a change on ``k`` items is O(d * k + cuts).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from truthsieve.core.labels import TIE_TOLERANCE
from truthsieve.exceptions import RuleClassError

RULE_COLUMN_PREFIX = "rule__"


class RuleClass:
    """Base class: a finite ordered list of rules over ``m`` items."""

    kind: str = ""
    size: int = 0

    def risks(self, cost0: np.ndarray, cost1: np.ndarray) -> np.ndarray:
        """Risk of every rule, in the class's order, for the given cost vectors."""
        # Sums of non-negative costs can round a zero risk to -1e-17.
        out = self.linear_risks(cost0, cost1)
        return np.maximum(out, 0.0, out=out)

    def linear_risks(self, cost0: np.ndarray, cost1: np.ndarray, items: np.ndarray | None = None) -> np.ndarray:
        """``sum_j cost0[j] [r(x_j) = 0] + cost1[j] [r(x_j) = 1]`` for every rule ``r``, unclipped.

        Linear in the costs, so it also scores a *change* of costs (entries may be
        negative). With ``items`` given, ``cost0`` and ``cost1`` are the costs on those
        item positions only (zero elsewhere) and the work is proportional to
        ``len(items)``, not to ``m``.
        """
        raise NotImplementedError

    def predict(self, index: int, items: np.ndarray | None = None) -> np.ndarray:
        """Labels (bool, one per item) of rule ``index``; on ``items`` only when given."""
        raise NotImplementedError

    def describe(self, index: int) -> dict:
        """The contract's JSON form of rule ``index``."""
        raise NotImplementedError

    def fit(self, cost0: np.ndarray, cost1: np.ndarray) -> int:
        """Exact ERM: index of the first rule of minimal risk."""
        return first_minimum(self.risks(cost0, cost1))


def first_minimum(risks: np.ndarray) -> int:
    """Index of the first entry within :data:`TIE_TOLERANCE` of the minimum."""
    return int(np.flatnonzero(risks <= risks.min() + TIE_TOLERANCE)[0])


class ConstantRules(RuleClass):
    """The two constant rules: label everything 0, or everything 1."""

    kind = "constant"
    size = 2

    def __init__(self, n_items: int) -> None:
        self.n_items = n_items

    def linear_risks(self, cost0, cost1, items=None):
        return np.array([np.sum(cost0), np.sum(cost1)], dtype=np.float64)

    def predict(self, index, items=None):
        return np.full(self.n_items if items is None else len(items), bool(index))

    def describe(self, index):
        return {"kind": "constant", "label": int(index)}


@dataclass(frozen=True)
class _SortedFeature:
    name: str
    order: np.ndarray  # item positions in increasing feature value
    split_after: np.ndarray  # k: a cut lies between sorted positions k-1 and k
    cuts: np.ndarray  # midpoints, increasing
    values: np.ndarray  # the feature, in item order
    bins: np.ndarray  # int32 per item (item order): how many cuts lie below its value


class ThresholdRules(RuleClass):
    """One feature, one cut: ``x > cut`` gets label ``above``, the rest the other label.

    Cuts are midpoints between consecutive distinct observed values; the two constant
    rules are members too (indices 0 and 1).
    """

    kind = "threshold"

    def __init__(self, features: pd.DataFrame) -> None:
        self.n_items = len(features)
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
        self.offsets = np.cumsum([2] + [2 * len(f.cuts) for f in self.features])
        self.size = int(self.offsets[-1])

    def linear_risks(self, cost0, cost1, items=None):
        """Per feature, ``B_k = sum_{j below cut k} (cost1[j] - cost0[j])`` is one
        ``bincount`` of the items' cut bins, cumulated; then ``above=0`` costs
        ``total0 + B_k`` and ``above=1`` costs ``total1 - B_k``."""
        cost0, cost1 = np.asarray(cost0, dtype=np.float64), np.asarray(cost1, dtype=np.float64)
        total0, total1 = cost0.sum(), cost1.sum()
        difference = cost1 - cost0
        out = np.empty(self.size)
        out[0], out[1] = total0, total1
        for feature, start in zip(self.features, self.offsets[:-1]):
            n_cuts = len(feature.cuts)
            bins = feature.bins if items is None else feature.bins[items]
            below = np.cumsum(np.bincount(bins, weights=difference, minlength=n_cuts + 1)[:n_cuts])
            out[start : start + 2 * n_cuts : 2] = total0 + below  # above=0
            out[start + 1 : start + 2 * n_cuts : 2] = total1 - below  # above=1
        return out

    def locate(self, index: int) -> tuple[_SortedFeature, int, int]:
        """(feature, cut position, above label) of a non-constant rule."""
        block = int(np.searchsorted(self.offsets, index, side="right")) - 1
        feature = self.features[block]
        position, above = divmod(index - int(self.offsets[block]), 2)
        return feature, position, above

    def predict(self, index, items=None):
        if index < 2:
            return np.full(self.n_items if items is None else len(items), bool(index))
        feature, position, above = self.locate(index)
        values = feature.values if items is None else feature.values[items]
        is_above = values > feature.cuts[position]
        return is_above if above else ~is_above

    def describe(self, index):
        if index < 2:
            return {"kind": "constant", "label": int(index)}
        feature, position, above = self.locate(index)
        return {"kind": "threshold", "feature": feature.name, "cut": float(feature.cuts[position]), "above": above}


class ListedRules(RuleClass):
    """A finite set of candidate rules given as boolean item columns ``rule__<name>``."""

    kind = "listed"

    def __init__(self, rules: pd.DataFrame) -> None:
        if rules.shape[1] == 0:
            raise RuleClassError(f"listed class has no rules: no column starts with {RULE_COLUMN_PREFIX!r}")
        names = sorted(rules.columns)
        self.names = [name[len(RULE_COLUMN_PREFIX):] for name in names]
        self.table = rules[names].to_numpy().astype(bool)
        self.size = len(names)

    def linear_risks(self, cost0, cost1, items=None):
        table = self.table if items is None else self.table[items]
        return np.sum(cost0) + (np.asarray(cost1, dtype=np.float64) - cost0) @ table

    def predict(self, index, items=None):
        return self.table[:, index].copy() if items is None else self.table[items, index]

    def describe(self, index):
        return {"kind": "listed", "name": self.names[index]}


RULE_CLASS_KINDS = ("constant", "threshold", "listed")


def build_rule_class(
    kind: str, items: pd.DataFrame, item_ids: np.ndarray, features: Sequence[str] = ()
) -> RuleClass:
    """Build the rule class ``kind`` over the items, aligned to ``item_ids``.

    :param items: the items table (``item_id``, features, ``rule__*`` columns).
    :param item_ids: the order of items in the label matrix.
    :param features: the threshold class's features, in tie-break order.
    :raises RuleClassError: unknown kind, missing or unusable features, no listed rules.
    """
    aligned = items.set_index(items["item_id"].astype(str)).reindex(item_ids)
    if kind == "constant":
        return ConstantRules(len(item_ids))
    if kind == "threshold":
        if not features:
            raise RuleClassError("threshold class needs at least one feature")
        absent = [f for f in features if f not in aligned.columns]
        if absent:
            raise RuleClassError(f"threshold features not in the items table: {', '.join(absent)}")
        return ThresholdRules(aligned[list(features)])
    if kind == "listed":
        columns = [c for c in aligned.columns if str(c).startswith(RULE_COLUMN_PREFIX)]
        return ListedRules(aligned[columns])
    raise RuleClassError(f"unknown rule class {kind!r}; expected one of {', '.join(RULE_CLASS_KINDS)}")
