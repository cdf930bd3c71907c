"""Oracle for tests/core/test_flips.py: the incentive analysis as it was before the
segment reachability check (core/flips.py), as of 5abdf58.

Only the functions that changed are kept here, verbatim (``_Source``, ``_reaches``,
``_cheapest_lie``, ``analyse_source``); the unchanged ones are imported from
``core/incentives.py``, so a test comparing the two compares the old search with the
new one, nothing else. Do not edit: it is the "before" to compare with.
"""

from __future__ import annotations

import numpy as np

from truthsieve.core.incentives import (  # unchanged by the segment check
    DEFAULT_THRESHOLD_BUDGET,
    SourceIncentive,
    _by_private_risk,
    _lie_order,
    context_from_totals,
    incentive_context,
)
from truthsieve.core.labels import LabelMatrix
from truthsieve.core.mechanisms import ConsensusFit
from truthsieve.core.rules import RuleClass, ThresholdRules, first_minimum
from truthsieve.core.search import smallest_satisfying
from truthsieve.core.statistics import TIE_TOLERANCE, FloatArray, IntArray, SourceLabels

__all__ = ["DEFAULT_THRESHOLD_BUDGET", "SourceIncentive", "analyse_source", "context_from_totals", "incentive_context"]


class _Source:
    """Source ``i``'s private costs, kept on its own items ``S_i`` only.

    **Incremental scoring.** If ``i`` reports ``z`` instead of ``y_i``, its cost array
    changes only on the flipped set ``F = {j in S_i : z_j != y_ij}``: with
    ``s_j = u_j / U_i``, the column of the old class ``y_ij`` gains ``s_j`` (predicting it
    is now wrong) and the column of the new class ``z_j`` loses ``s_j``; the other
    ``K - 2`` columns do not change (with two classes: ``cost0`` and ``cost1`` move by
    ``+-s_j`` in opposite directions). Risks are linear in the costs, so every rule's
    risk under ``z`` is the base risk plus ``linear_risks`` of that change on ``F``: a
    ``bincount`` of ``F``'s cut bins per feature and class, O(d K |F| + cuts K²),
    instead of a full pass. For a rule ``r`` the change is
    ``sum_{j in F} s_j ([r(x_j) = y_ij] - [r(x_j) = z_j])``.
    """

    def __init__(self, own: SourceLabels, rule_class: RuleClass) -> None:
        self.items = own.items
        self.truth = own.classes
        self.shares = own.shares
        self.item_weights = own.item_weights
        self.rule_class = rule_class
        self.private_linear = rule_class.linear_risks(own.sparse_costs(rule_class.n_classes), items=self.items)

    def flip_change(self, positions: IntArray, classes: IntArray) -> FloatArray:
        """Change of every rule's private risk when the labels at ``positions`` (indices
        into ``self.items``) become ``classes``."""
        shares = self.shares[positions]
        rows = np.arange(len(positions))
        change = np.zeros((len(positions), self.rule_class.n_classes))
        change[rows, self.truth[positions]] = shares
        change[rows, classes] = -shares
        return self.rule_class.linear_risks(change, items=self.items[positions])

    def towards(self, rule: int) -> tuple[IntArray, IntArray]:
        """Positions in ``S_i`` where ``rule`` differs from ``y_i``, and ``rule``'s classes
        there: O(|S_i|)."""
        predicted = self.rule_class.predict(rule, self.items)
        positions = np.flatnonzero(predicted != self.truth)
        return positions, predicted[positions]

    def change_to(self, rule: int) -> FloatArray:
        """Change of every rule's R_i if the source reported ``rule``'s labels."""
        return self.flip_change(*self.towards(rule))


def _reaches(global_linear: FloatArray, weight: float, change: FloatArray, target: int) -> bool:
    # risks(G + w * costs(z)) = R + w * (change of R_i), R the global risk with y_i.
    risks = global_linear + weight * change
    return first_minimum(np.maximum(risks, 0.0, out=risks)) == target


def _cheapest_lie(
    source: _Source, own: SourceLabels, target: int, consensus_rule: int, global_linear: FloatArray
) -> tuple[float, float]:
    if target == consensus_rule:
        return 0.0, 0.0
    weight = own.weight
    totals = np.maximum(global_linear, 0.0)
    deficit = max(0.0, float((totals[target] - totals).max()))
    lower = deficit * own.coverage / (2.0 * weight)

    disagreeing, classes = source.towards(target)
    order = _lie_order(source.rule_class, target, source.items[disagreeing])
    ordered, ordered_classes = disagreeing[order], classes[order]

    def reaches_with(count: int) -> bool:
        return _reaches(global_linear, weight, source.flip_change(ordered[:count], ordered_classes[:count]), target)

    # Reachable with the first `high` flips, not with the first `low`. Prefixes lighter
    # than the margin bound cannot reach, so the search starts there and gallops up:
    # with unit weights the bound is nearly tight and a few checks suffice.
    ordered_weights = source.item_weights[ordered]
    prefix_weight = np.cumsum(ordered_weights)
    low = int(np.searchsorted(prefix_weight, lower - TIE_TOLERANCE, side="left"))
    high = smallest_satisfying(reaches_with, low, len(ordered))  # every flip made reaches
    upper = float(ordered_weights[:high].sum())
    return float(lower), max(upper, float(lower))


def analyse_source(
    global_linear: FloatArray,
    own: SourceLabels,
    rule_class: RuleClass,
    consensus: ConsensusFit,
    budget: int | None = None,
) -> SourceIncentive:
    """Gain bracket, best reachable target and cheapest lie of one source.

    By linearity the others' risks are ``G = R - w R_i``, and every reachability check
    and distance ``d_i(c, .)`` is ``R_i`` plus the change on the items where ``c``
    differs from ``y_i`` (see :class:`_Source`): no full pass over the night per check,
    and nothing of the other sources but the night's summed risks.

    :param global_linear: :func:`context_from_totals` of the night (the unclipped global
        risk of every rule), shared by every source.
    :param own: the source's sparse labels.
    :param budget: most reachability checks for the threshold class (None: unlimited);
        the constant and listed classes are always searched exhaustively.
    """
    if budget is None or not isinstance(rule_class, ThresholdRules):
        budget = rule_class.size
    weight = own.weight
    source = _Source(own, rule_class)
    private = np.maximum(source.private_linear, 0.0)
    others_risks = np.maximum(global_linear - weight * source.private_linear, 0.0)
    consensus_rule = consensus.rule
    others_rule = first_minimum(others_risks)
    own_rule = first_minimum(private)

    def distance_to(rule: int) -> FloatArray:
        return np.maximum(source.private_linear + source.change_to(rule), 0.0)

    survivors = (others_risks <= others_risks[others_rule] + weight * distance_to(others_rule) + TIE_TOLERANCE) & (
        others_risks <= others_risks[consensus_rule] + weight * distance_to(consensus_rule) + TIE_TOLERANCE
    )
    best_known = min((consensus_rule, others_rule), key=lambda r: (private[r], r))
    candidates = _by_private_risk(np.flatnonzero(survivors & (private < private[best_known] - TIE_TOLERANCE)), private)

    target, exact, checks, untested_floor = best_known, True, 0, 0.0
    for candidate in candidates:
        if checks >= budget:
            exact, untested_floor = False, float(private[candidate])
            break
        checks += 1
        if _reaches(global_linear, weight, source.change_to(int(candidate)), int(candidate)):
            target = int(candidate)
            break

    disagreement = float(private[consensus_rule])
    gain_lower = max(0.0, disagreement - float(private[target]))
    gain_upper = gain_lower if exact else max(gain_lower, disagreement - untested_floor)
    lie_lower, lie_upper = _cheapest_lie(source, own, target, consensus_rule, global_linear)
    global_risks = others_risks + weight * private
    return SourceIncentive(
        source_id=own.source_id,
        disagreement=disagreement,
        own_best_rule=own_rule,
        own_best_risk=float(private[own_rule]),
        gain_lower=gain_lower,
        gain_upper=gain_upper,
        gain_exact=exact,
        target_rule=int(target),
        target_risk=float(private[target]),
        lie_weight_lower=lie_lower,
        lie_weight_upper=lie_upper,
        damage=max(0.0, float(global_risks[target] - consensus.risk)),
        checks=checks,
        pull=max(0.0, float(others_risks[consensus_rule] - others_risks[others_rule])),
        others_rule=int(others_rule),
    )


