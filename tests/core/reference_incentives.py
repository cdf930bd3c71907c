"""Oracle for the fast incentive analysis: the straightforward algorithm, full passes only.

This is the cheapest-lie and gain search exactly as :mod:`truthsieve.core.incentives`
ran it before the incremental fast paths: every reachability check rebuilds the
cost vectors from scratch and scores every rule with a dense prediction matrix
(``risk = cost0 @ (1 - P) + cost1 @ P``), which shares no code with the prefix sums
and cut bins of :class:`~truthsieve.core.rules.ThresholdRules`. Only ``predict`` and
``locate`` of the rule class are used.
"""

from __future__ import annotations

import numpy as np

TIE_TOLERANCE = 1e-10


def predictions(rule_class) -> np.ndarray:
    """(m, size) bool matrix: column r is rule r's labels."""
    return np.column_stack([rule_class.predict(r) for r in range(rule_class.size)])


def dense_risks(table: np.ndarray, cost0: np.ndarray, cost1: np.ndarray) -> np.ndarray:
    return np.maximum(cost0 @ ~table + cost1 @ table, 0.0)


def first_minimum(risks: np.ndarray) -> int:
    return int(np.flatnonzero(risks <= risks.min() + TIE_TOLERANCE)[0])


def coverage(matrix) -> np.ndarray:
    return np.array([matrix.item_weights[matrix.labelled[i]].sum() for i in range(matrix.n_sources)])


def report_costs(matrix, index, report):
    share = np.where(matrix.labelled[index], matrix.item_weights, 0.0) / coverage(matrix)[index]
    positive = np.asarray(report).astype(bool)
    return np.where(positive, share, 0.0), np.where(positive, 0.0, share)


def others_costs(matrix, exclude):
    cost0, cost1 = np.zeros(matrix.n_items), np.zeros(matrix.n_items)
    for i in range(matrix.n_sources):
        if i != exclude:
            c0, c1 = report_costs(matrix, i, matrix.labels[i])
            cost0 += matrix.source_weights[i] * c0
            cost1 += matrix.source_weights[i] * c1
    return cost0, cost1


def reference_incentive(matrix, rule_class, consensus_rule: int, consensus_risk: float, index: int, budget=None) -> dict:
    """Every field of ``SourceIncentive`` (as a dict) by the full-pass algorithm."""
    table = predictions(rule_class)
    if budget is None or rule_class.kind != "threshold":
        budget = rule_class.size
    weight = matrix.source_weights[index]
    truth = matrix.labels[index].astype(bool)
    others = others_costs(matrix, index)
    others_risks = dense_risks(table, *others)
    private = dense_risks(table, *report_costs(matrix, index, truth))
    others_rule, own_rule = first_minimum(others_risks), first_minimum(private)

    def reaches(report, target):
        extra0, extra1 = report_costs(matrix, index, report)
        return first_minimum(dense_risks(table, others[0] + weight * extra0, others[1] + weight * extra1)) == target

    def distance_to(rule):
        return dense_risks(table, *report_costs(matrix, index, table[:, rule]))

    survivors = (others_risks <= others_risks[others_rule] + weight * distance_to(others_rule) + TIE_TOLERANCE) & (
        others_risks <= others_risks[consensus_rule] + weight * distance_to(consensus_rule) + TIE_TOLERANCE
    )
    best_known = min((consensus_rule, others_rule), key=lambda r: (private[r], r))
    candidates = np.flatnonzero(survivors & (private < private[best_known] - TIE_TOLERANCE))
    candidates = candidates[np.lexsort((candidates, private[candidates]))]
    # Private risks within the tolerance of the previous one are tied: rule order.
    group = np.cumsum(np.diff(private[candidates], prepend=private[candidates][:1]) > TIE_TOLERANCE)
    candidates = candidates[np.lexsort((candidates, group))]
    target, exact, checks, floor = best_known, True, 0, None
    for candidate in candidates:
        if checks >= budget:
            exact, floor = False, float(private[candidate])
            break
        checks += 1
        if reaches(table[:, candidate], candidate):
            target = int(candidate)
            break
    disagreement = float(private[consensus_rule])
    gain_lower = max(0.0, disagreement - float(private[target]))
    gain_upper = gain_lower if exact else max(gain_lower, disagreement - floor)

    # Cheapest lie: linear scan over prefixes of the same order (the smallest reaching one).
    if target == consensus_rule:
        lie_lower = lie_upper = 0.0
    else:
        totals = dense_risks(table, others[0] + weight * private_costs(matrix, index)[0], others[1] + weight * private_costs(matrix, index)[1])
        deficit = max(0.0, float((totals[target] - totals).max()))
        lie_lower = deficit * coverage(matrix)[index] / (2.0 * weight)
        target_labels = table[:, target]
        disagreeing = np.flatnonzero(matrix.labelled[index] & (truth != target_labels))
        if rule_class.kind == "threshold" and target >= 2:
            feature, position, _ = rule_class.locate(target)
            distance = np.abs(feature.values[disagreeing] - feature.cuts[position])
            disagreeing = disagreeing[np.argsort(distance, kind="stable")]
        prefix_weight = np.cumsum(matrix.item_weights[disagreeing])
        low = int(np.searchsorted(prefix_weight, lie_lower - TIE_TOLERANCE, side="left"))
        high, step = len(disagreeing), 1

        def reaches_with(count):
            report = truth.copy()
            report[disagreeing[:count]] = target_labels[disagreeing[:count]]
            return reaches(report, target)

        while low + step < high:
            if reaches_with(low + step):
                high = low + step
                break
            low, step = low + step, step * 2
        while high - low > 1:
            middle = (low + high) // 2
            if reaches_with(middle):
                high = middle
            else:
                low = middle
        lie_upper = max(float(matrix.item_weights[disagreeing[:high]].sum()), float(lie_lower))
    global_risks = others_risks + weight * private
    return {
        "source_id": matrix.source_ids[index],
        "disagreement": disagreement,
        "own_best_rule": own_rule,
        "own_best_risk": float(private[own_rule]),
        "gain_lower": gain_lower,
        "gain_upper": gain_upper,
        "gain_exact": exact,
        "target_rule": int(target),
        "target_risk": float(private[target]),
        "lie_weight_lower": float(lie_lower),
        "lie_weight_upper": lie_upper,
        "damage": max(0.0, float(global_risks[target] - consensus_risk)),
        "checks": checks,
        "pull": max(0.0, float(others_risks[consensus_rule] - others_risks[others_rule])),
        "others_rule": int(others_rule),
    }


def private_costs(matrix, index):
    return report_costs(matrix, index, matrix.labels[index])
