"""The rule-class base: every rule's risk from one ``(m, K)`` cost array, and the tie-break.

``risk(r) = sum_j costs[j, r(x_j)]``; ERM is the first rule, in the class's listed
order, within :data:`~truthsieve.core.statistics.TIE_TOLERANCE` of the minimum.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from truthsieve.core.statistics import TIE_TOLERANCE
from truthsieve.core.statistics import FloatArray, IntArray

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
