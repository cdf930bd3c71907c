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

The threshold class and its ERM live in :mod:`truthsieve.core.threshold_rules`.

**Adding a rule class is one entry in** :data:`RULE_CLASSES` (a :class:`RuleClassKind`:
name, builder, what it needs). :func:`build_rule_class`, :data:`RULE_CLASS_KINDS`, the
configuration's ``rule_class.kind`` (and its ``features`` requirement) and the mechanisms'
rule-class checks all read that registry.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from truthsieve.core.registry import Registry
from truthsieve.core.rule_class import RULE_COLUMN_PREFIX, RuleClass, RuleForm, class_totals, first_minimum
from truthsieve.core.statistics import FloatArray, IntArray
from truthsieve.core.threshold_rules import ThresholdRules
from truthsieve.exceptions import ClassIndexError, RuleClassError

if TYPE_CHECKING:
    import pandas as pd

__all__ = [
    "RULE_CLASSES",
    "RULE_CLASS_KINDS",
    "RULE_COLUMN_PREFIX",
    "ConstantRules",
    "ListedRules",
    "RuleClass",
    "RuleClassKind",
    "RuleForm",
    "ThresholdRules",
    "build_rule_class",
    "class_totals",
    "first_minimum",
    "rule_class_kind",
]


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


@dataclass(frozen=True)
class RuleClassKind:
    """One rule class: its ``rule_class.kind`` name, its builder and what the builder needs.

    :param build: ``build(columns, n_items, n_classes)`` with ``columns`` the items table
        aligned to the label matrix and cut down to what the entry says it needs: the
        configured features in tie-break order (``needs_features``), then the ``rule__*``
        columns (``uses_rule_columns``).
    :param size_for_classes: the number of rules as a function of ``K`` when the items do
        not change it (``constant``: ``K``), else None; the configuration uses it to refuse
        a mechanism that needs a fixed number of rules before any data is read.
    :param grows_with_items: the class's rules are cut from the items' values (``threshold``),
        so no finite size is fixed before the labels: the sample-size bound goes through
        the growth function over the configured features, not a union bound.
    """

    name: str
    description: str
    build: Callable[[pd.DataFrame, int, int], RuleClass]
    needs_features: bool = False
    uses_rule_columns: bool = False
    size_for_classes: Callable[[int], int] | None = None
    grows_with_items: bool = False


def _rule_columns(columns: pd.Index) -> list[str]:
    return [c for c in columns if str(c).startswith(RULE_COLUMN_PREFIX)]


RULE_CLASSES: Registry[RuleClassKind] = Registry(
    "rule class",
    [
        RuleClassKind(
            "constant", "label everything k", lambda columns, n_items, k: ConstantRules(n_items, k), size_for_classes=lambda k: k
        ),
        RuleClassKind(
            "threshold",
            "x > cut gets one class, the rest another, per feature; the constant rules too",
            lambda columns, n_items, k: ThresholdRules(columns, k),
            needs_features=True,
            grows_with_items=True,
        ),
        RuleClassKind(
            "listed", "the rule__<name> columns of the items table", lambda columns, n_items, k: ListedRules(columns, k), uses_rule_columns=True
        ),
    ],
)
# The kinds, in registry order: a live view, so a registered kind shows up here too.
RULE_CLASS_KINDS = RULE_CLASSES.names()


def rule_class_kind(kind: str) -> RuleClassKind:
    """The registry entry of ``kind``.

    :raises RuleClassError: unknown kind (the message lists the registered ones).
    """
    return RULE_CLASSES.require(kind, RuleClassError)


def build_rule_class(
    kind: str, items: pd.DataFrame, item_ids: np.ndarray, features: Sequence[str] = (), n_classes: int = 2
) -> RuleClass:
    """Build the rule class ``kind`` (its :data:`RULE_CLASSES` entry) over the items, aligned to ``item_ids``.

    :param items: the items table (``item_id``, features, ``rule__*`` columns).
    :param item_ids: the order of items in the label matrix.
    :param features: the features of a class that needs them, in tie-break order.
    :param n_classes: ``K``, the number of classes.
    :raises RuleClassError: unknown kind, missing or unusable features, no listed rules.
    :raises ClassIndexError: a listed rule column holds a value outside ``0 .. K-1``.
    """
    entry = rule_class_kind(kind)
    aligned = items.set_index(items["item_id"].astype(str)).reindex(item_ids)
    needed: list[str] = []
    if entry.needs_features:
        if not features:
            raise RuleClassError(f"{kind} class needs at least one feature")
        absent = [f for f in features if f not in aligned.columns]
        if absent:
            raise RuleClassError(f"{kind} features not in the items table: {', '.join(absent)}")
        needed += list(features)
    if entry.uses_rule_columns:
        needed += _rule_columns(aligned.columns)
    return entry.build(aligned[needed], len(item_ids), n_classes)
