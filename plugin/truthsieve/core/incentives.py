"""How much each source could gain by misreporting while the consensus fit (ERM) is used.

Take source ``i``'s report as its truth. Let ``G(r)`` be the global risk of rule ``r``
without ``i``'s term, ``w`` its normalised weight and ``d_i(a, b)`` the item-weighted
fraction of ``i``'s items on which ``a`` and ``b`` differ (so ``R_i(c) = d_i(c, y_i)``).
If ``i`` reports labels ``z``, ERM minimises ``G(r) + w d_i(r, z)``.

**Reporting the target's own labels is a best way to reach it.** For a target rule
``c`` and any report ``z``, the margin of ``c`` over a rival ``r`` is
``G(r) - G(c) + w (d_i(r, z) - d_i(c, z))``. By the triangle inequality
``d_i(r, z) - d_i(c, z) <= d_i(r, c)``, with equality for ``z = c`` on ``S_i``. So
``z = c`` maximises ``c``'s margin over every rival at once, and ``c`` is *reachable*
(some report makes ERM return it) exactly when ERM on the others' reports plus ``i``
reporting ``c`` returns ``c`` under the class's tie-break.

Hence ``gain_i = R_i(e) - min{R_i(c) : c reachable}`` with ``e`` the consensus. The
truthful consensus ``e`` is reachable, and so is the others' own ERM ``o`` (reporting
``o`` makes it minimise both terms, and the tie-break order is the same), which gives
the lower bound ``max(0, R_i(e) - R_i(o))`` for free.

**Search.** A reachable ``c`` must beat ``o`` and ``e``:
``G(c) <= G(o) + w d_i(o, c)`` and ``G(c) <= G(e) + w d_i(e, c)``. Each side is one
vectorised risk evaluation over the whole class. Survivors with ``R_i`` below the
best known reachable rule are checked in increasing ``R_i``; the first reachable one
closes the bracket. For ``constant`` and ``listed`` every survivor is checked (exact);
for ``threshold`` at most ``budget`` checks are made per source, and if they run out
the result is the bracket ``[gain_lower, gain_upper]`` with ``gain_exact = False``.

**Cheapest lie.** Flipping a label of ``i`` towards ``c`` on item ``j`` raises ``c``'s
margin over ``r`` by ``2 w u_j / U_i`` if ``r`` differs from ``c`` on ``j``, else by 0,
so a lie needs at least ``max_r (deficit_r) U_i / (2 w)`` of item weight
(``lie_weight_lower``). Flips only ever raise margins, so reachability is monotone
along any order of the disagreeing items; a binary search over a prefix in a useful
order gives a lie that works (``lie_weight_upper``). For the constant class with unit
item weights every disagreeing item is alike and the upper value is the minimum.

**Pull on the fit.** ``gain`` takes the report as the truth, so a source that already
reports its target rule shows gain 0: its lie has won. ``pull`` looks at the others
instead: ``pull_i = G(e) - min_c G(c) = G(e) - G(o)``, the others' weighted risk that
``i``'s report adds by moving the fit from the others' own ERM ``o`` to the consensus
``e``. It is 0 when ``i`` does not move the fit, and at most ``w``: ERM chose ``e``
over ``o``, so ``G(e) - G(o) <= w (R_i(o) - R_i(e)) <= w``. An honest source in
the majority pulls almost nothing; a strategic report that won pulls a lot.

Under every strategy-proof mechanism the gain is 0 by construction; this module
measures the consensus fit, which is what would be used without them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from truthsieve.core.labels import TIE_TOLERANCE, LabelMatrix, report_costs
from truthsieve.core.mechanisms import ConsensusFit
from truthsieve.core.rules import RuleClass, ThresholdRules, first_minimum

DEFAULT_THRESHOLD_BUDGET = 64


@dataclass(frozen=True)
class SourceIncentive:
    """One source's incentive to misreport under the consensus fit.

    ``target_rule`` is the reachable rule of lowest ``R_i`` found; ``damage`` is the
    global risk the lie towards it would add, ``R(target) - r*``. ``pull`` is
    ``G(e) - G(o)`` with ``G`` the others' weighted risk (night's normalised weights),
    ``e`` the consensus and ``o = others_rule`` the others' own ERM.
    """

    source_id: str
    disagreement: float
    own_best_rule: int
    own_best_risk: float
    gain_lower: float
    gain_upper: float
    gain_exact: bool
    target_rule: int
    target_risk: float
    lie_weight_lower: float
    lie_weight_upper: float
    damage: float
    checks: int
    pull: float = 0.0
    others_rule: int = 0


def _reaches(rule_class, others, weight, matrix, index, report, target) -> bool:
    extra0, extra1 = report_costs(matrix, index, report)
    return first_minimum(rule_class.risks(others[0] + weight * extra0, others[1] + weight * extra1)) == target


def _lie_order(rule_class: RuleClass, target: int, disagreeing: np.ndarray) -> np.ndarray:
    """Disagreeing items, most useful first: nearest the target's cut for thresholds."""
    if isinstance(rule_class, ThresholdRules) and target >= 2:
        feature, position, _ = rule_class.locate(target)
        distance = np.abs(feature.values[disagreeing] - feature.cuts[position])
        return disagreeing[np.argsort(distance, kind="stable")]
    return disagreeing


def cheapest_lie(
    matrix: LabelMatrix, rule_class: RuleClass, index: int, target: int, others, consensus_rule: int
) -> tuple[float, float]:
    """(lower, upper) item weight of labels source ``index`` must change to reach ``target``."""
    if target == consensus_rule:
        return 0.0, 0.0
    weight = matrix.source_weights[index]
    truth = matrix.labels[index].astype(bool)
    own0, own1 = matrix.source_costs(index)
    totals = rule_class.risks(others[0] + weight * own0, others[1] + weight * own1)
    deficit = max(0.0, float((totals[target] - totals).max()))
    lower = deficit * matrix.coverage_weight[index] / (2.0 * weight)

    target_labels = rule_class.predict(target)
    disagreeing = np.flatnonzero(matrix.labelled[index] & (truth != target_labels))
    ordered = _lie_order(rule_class, target, disagreeing)

    def reaches_with(count: int) -> bool:
        report = truth.copy()
        report[ordered[:count]] = target_labels[ordered[:count]]
        return _reaches(rule_class, others, weight, matrix, index, report, target)

    # Reachable with the first `high` flips, not with the first `low`. Prefixes lighter
    # than the margin bound cannot reach, so the search starts there and gallops up:
    # with unit weights the bound is nearly tight and a few checks suffice.
    prefix_weight = np.cumsum(matrix.item_weights[ordered])
    low = int(np.searchsorted(prefix_weight, lower - TIE_TOLERANCE, side="left"))
    high, step = len(ordered), 1
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
    upper = float(matrix.item_weights[ordered[:high]].sum())
    return float(lower), max(upper, float(lower))


def source_incentive(
    matrix: LabelMatrix,
    rule_class: RuleClass,
    consensus: ConsensusFit,
    index: int,
    budget: int | None = None,
) -> SourceIncentive:
    """Gain bracket, best reachable target and cheapest lie of source ``index``.

    :param budget: most reachability checks for the threshold class (None: unlimited);
        the constant and listed classes are always searched exhaustively.
    """
    if budget is None or not isinstance(rule_class, ThresholdRules):
        budget = rule_class.size
    weight = matrix.source_weights[index]
    others = matrix.global_costs(exclude=index)
    others_risks = rule_class.risks(*others)
    private = rule_class.risks(*matrix.source_costs(index))
    consensus_rule = consensus.rule
    others_rule = first_minimum(others_risks)
    own_rule = first_minimum(private)

    def distance_to(rule: int) -> np.ndarray:
        return rule_class.risks(*report_costs(matrix, index, rule_class.predict(rule)))

    survivors = (others_risks <= others_risks[others_rule] + weight * distance_to(others_rule) + TIE_TOLERANCE) & (
        others_risks <= others_risks[consensus_rule] + weight * distance_to(consensus_rule) + TIE_TOLERANCE
    )
    best_known = min((consensus_rule, others_rule), key=lambda r: (private[r], r))
    candidates = np.flatnonzero(survivors & (private < private[best_known] - TIE_TOLERANCE))
    candidates = candidates[np.lexsort((candidates, private[candidates]))]

    target, exact, checks, untested_floor = best_known, True, 0, None
    for candidate in candidates:
        if checks >= budget:
            exact, untested_floor = False, float(private[candidate])
            break
        checks += 1
        if _reaches(rule_class, others, weight, matrix, index, rule_class.predict(candidate), candidate):
            target = int(candidate)
            break

    disagreement = float(private[consensus_rule])
    gain_lower = max(0.0, disagreement - float(private[target]))
    gain_upper = gain_lower if exact else max(gain_lower, disagreement - untested_floor)
    lie_lower, lie_upper = cheapest_lie(matrix, rule_class, index, target, others, consensus_rule)
    global_risks = others_risks + weight * private
    return SourceIncentive(
        source_id=matrix.source_ids[index],
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


def incentives(
    matrix: LabelMatrix, rule_class: RuleClass, consensus: ConsensusFit, budget: int | None = DEFAULT_THRESHOLD_BUDGET
) -> list[SourceIncentive]:
    """:func:`source_incentive` for every source, in source order."""
    return [source_incentive(matrix, rule_class, consensus, i, budget) for i in range(matrix.n_sources)]
