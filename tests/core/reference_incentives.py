"""Oracle for the fast incentive analysis: the straightforward algorithm, full passes only.

This is the cheapest-lie and gain search exactly as :mod:`truthsieve.core.incentives`
ran it before the incremental fast paths: every reachability check rebuilds the
cost arrays from scratch and scores every rule with a dense prediction matrix
(``risk[r] = sum_j costs[j, P[j, r]]``, for any number of classes), which shares no
code with the prefix sums and cut bins of :class:`~truthsieve.core.rules.ThresholdRules`.
Only ``predict`` and ``locate`` of the rule class are used, and the label matrix's
dense arrays (never its cached costs).
"""

from __future__ import annotations

import numpy as np

TIE_TOLERANCE = 1e-10


def predictions(rule_class) -> np.ndarray:
    """(m, size) int matrix: column r is rule r's classes."""
    return np.column_stack([rule_class.predict(r) for r in range(rule_class.size)])


def dense_risks(table: np.ndarray, costs: np.ndarray) -> np.ndarray:
    """``sum_j costs[j, table[j, r]]`` for every column r, clipped at 0."""
    picked = np.take_along_axis(costs, table, axis=1)  # (m, size)
    return np.maximum(picked.sum(axis=0), 0.0)


def first_minimum(risks: np.ndarray) -> int:
    return int(np.flatnonzero(risks <= risks.min() + TIE_TOLERANCE)[0])


def coverage(matrix) -> np.ndarray:
    return np.array([matrix.item_weights[matrix.labelled[i]].sum() for i in range(matrix.n_sources)])


def report_costs(matrix, index, report):
    """(m, K): share u_j / U_i where the class differs from the report, on labelled items."""
    share = np.where(matrix.labelled[index], matrix.item_weights, 0.0) / coverage(matrix)[index]
    report = np.asarray(report).astype(int)
    wrong = np.arange(matrix.n_classes)[np.newaxis, :] != report[:, np.newaxis]
    return share[:, np.newaxis] * wrong


def others_costs(matrix, exclude):
    costs = np.zeros((matrix.n_items, matrix.n_classes))
    for i in range(matrix.n_sources):
        if i != exclude:
            costs += matrix.source_weights[i] * report_costs(matrix, i, matrix.labels[i])
    return costs


def reference_incentive(matrix, rule_class, consensus_rule: int, consensus_risk: float, index: int, budget=None) -> dict:
    """Every field of ``SourceIncentive`` (as a dict) by the full-pass algorithm."""
    table = predictions(rule_class)
    if budget is None or rule_class.kind != "threshold":
        budget = rule_class.size
    weight = matrix.source_weights[index]
    truth = matrix.labels[index].astype(int)
    others = others_costs(matrix, index)
    others_risks = dense_risks(table, others)
    private = dense_risks(table, report_costs(matrix, index, truth))
    others_rule, own_rule = first_minimum(others_risks), first_minimum(private)

    def reaches(report, target):
        return first_minimum(dense_risks(table, others + weight * report_costs(matrix, index, report))) == target

    def distance_to(rule):
        return dense_risks(table, report_costs(matrix, index, table[:, rule]))

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
        totals = dense_risks(table, others + weight * private_costs(matrix, index))
        deficit = max(0.0, float((totals[target] - totals).max()))
        lie_lower = deficit * coverage(matrix)[index] / (2.0 * weight)
        target_labels = table[:, target]
        disagreeing = np.flatnonzero(matrix.labelled[index] & (truth != target_labels))
        if rule_class.kind == "threshold" and target >= matrix.n_classes:
            feature, position = rule_class.locate(target)[:2]
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


INTEGER_FIELDS = ("own_best_rule", "target_rule", "others_rule", "checks", "gain_exact", "source_id")


def assert_every_source_matches(matrix, rule_class, consensus, budget=None) -> None:
    """Every field of the fast analysis of every source equals this full-pass oracle
    (integers exactly, floats to 1e-9: the two sum in different orders)."""
    from dataclasses import asdict

    import pytest

    from truthsieve.core.incentives import source_incentive

    for i in range(matrix.n_sources):
        fast = asdict(source_incentive(matrix, rule_class, consensus, i, budget))
        expected = reference_incentive(matrix, rule_class, consensus.rule, consensus.risk, i, budget)
        for name, value in expected.items():
            if name in INTEGER_FIELDS:
                assert fast[name] == value, (name, i)
            else:
                assert fast[name] == pytest.approx(value, abs=1e-9), (name, i)
