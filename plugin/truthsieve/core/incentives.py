"""How much each source could gain by misreporting while the consensus fit (ERM) is used.

Take source ``i``'s report as its truth. Let ``G(r)`` be the global risk of rule ``r``
without ``i``'s term, ``w`` its normalised weight and ``d_i(a, b)`` the item-weighted
fraction of ``i``'s items on which ``a`` and ``b`` differ (so ``R_i(c) = d_i(c, y_i)``).
Labels are classes ``0 .. K-1``; ``d_i`` is a weighted Hamming distance, a metric for
any alphabet, so everything below holds for any ``K``. If ``i`` reports labels ``z``,
ERM minimises ``G(r) + w d_i(r, z)``. Only the night's summed costs and ``i``'s own
labels are needed: ``G = R - w R_i`` by linearity (:func:`analyse_source`).

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
``G(c) <= G(o) + w d_i(o, c)`` and ``G(c) <= G(e) + w d_i(e, c)``, tested only at the
rules with ``R_i`` below the best known reachable rule (``d_i`` read there, one pass when
``e = o``). Survivors are checked in increasing ``R_i`` (each check by cut segments, see
:mod:`truthsieve.core.flips`); the first reachable one closes the bracket. For ``constant`` and ``listed`` every survivor is checked (exact);
for ``threshold`` at most ``budget`` checks are made per source, and if they run out
the result is the bracket ``[gain_lower, gain_upper]`` with ``gain_exact = False``.

**Cheapest lie.** A flip changes ``i``'s label on item ``j`` from ``y_ij`` to ``c``'s
class ``c(x_j)``. It raises ``c``'s margin over ``r`` by ``2 w u_j / U_i`` if
``r(x_j) = y_ij``, by ``w u_j / U_i`` if ``r(x_j)`` is a third class (possible when
``K > 2``), and by 0 if ``r(x_j) = c(x_j)``; never more than ``2 w u_j / U_i``, so a lie
needs at least ``max_r (deficit_r) U_i / (2 w)`` of item weight
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

from truthsieve.core.flips import FlipSource
from truthsieve.core.labels import LabelMatrix
from truthsieve.core.statistics import TIE_TOLERANCE
from truthsieve.core.mechanisms import ConsensusFit
from truthsieve.core.rules import RuleClass, ThresholdRules, first_minimum
from truthsieve.core.search import smallest_satisfying
from truthsieve.core.statistics import FloatArray, IntArray, SourceLabels

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


def incentive_context(matrix: LabelMatrix, rule_class: RuleClass) -> FloatArray:
    """What every source's analysis shares: the unclipped global risk of every rule.

    A deterministic function of its inputs, so one source analysed alone (an Airflow
    mapped task) gets the same floats as the same source in a whole-batch loop.
    """
    return context_from_totals(matrix.global_costs(), rule_class)


def context_from_totals(totals: FloatArray, rule_class: RuleClass) -> FloatArray:
    """:func:`incentive_context` from the night's ``(m, K)`` summed costs."""
    return rule_class.linear_risks(totals)


def _lie_order(rule_class: RuleClass, target: int, items: IntArray) -> IntArray:
    """Disagreeing items, most useful first: nearest the target's cut for thresholds."""
    if isinstance(rule_class, ThresholdRules) and target >= rule_class.n_classes:
        feature, position, _, _ = rule_class.locate(target)
        distance = np.abs(feature.values[items] - feature.cuts[position])
        return np.argsort(distance, kind="stable")
    return np.arange(len(items))


def _by_private_risk(candidates: IntArray, private: FloatArray) -> IntArray:
    """Candidates by increasing private risk; risks within :data:`TIE_TOLERANCE` of the
    previous one count as tied and go in rule order, so float rounding cannot reorder."""
    ordered = candidates[np.lexsort((candidates, private[candidates]))]
    values = private[ordered]
    group = np.cumsum(np.diff(values, prepend=values[:1]) > TIE_TOLERANCE)
    result: IntArray = ordered[np.lexsort((ordered, group))]
    return result


def _cheapest_lie(
    source: FlipSource, own: SourceLabels, target: int, consensus_rule: int, global_linear: FloatArray
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
        return source.reaches(global_linear, weight, ordered[:count], ordered_classes[:count], target)

    # Reachable with the first `high` flips, not with the first `low`. Prefixes lighter
    # than the margin bound cannot reach, so the search starts there and gallops up:
    # with unit weights the bound is nearly tight and a few checks suffice.
    ordered_weights = source.item_weights[ordered]
    prefix_weight = np.cumsum(ordered_weights)
    low = int(np.searchsorted(prefix_weight, lower - TIE_TOLERANCE, side="left"))
    high = smallest_satisfying(reaches_with, low, len(ordered))  # every flip made reaches
    upper = float(ordered_weights[:high].sum())
    return float(lower), max(upper, float(lower))


def source_incentive(
    matrix: LabelMatrix,
    rule_class: RuleClass,
    consensus: ConsensusFit,
    index: int,
    budget: int | None = None,
    global_linear: FloatArray | None = None,
) -> SourceIncentive:
    """:func:`analyse_source` for source ``index`` of the whole night's matrix."""
    if global_linear is None:
        global_linear = incentive_context(matrix, rule_class)
    return analyse_source(global_linear, matrix.sources[index], rule_class, consensus, budget)


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
    differs from ``y_i`` (see :mod:`truthsieve.core.flips`): no full pass over the night per check,
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
    source = FlipSource(own, rule_class)
    private = np.maximum(source.private_linear, 0.0)
    others_risks = np.maximum(global_linear - weight * source.private_linear, 0.0)
    consensus_rule = consensus.rule
    others_rule = first_minimum(others_risks)
    own_rule = first_minimum(private)

    # Only rules cheaper for i than the best known reachable one are candidates, and of those
    # only the ones that could beat o and e: G(c) <= G(r) + w d_i(r, c) for r = o, e (the
    # distance read at those rules only, the same floats as over the whole class).
    best_known = min((consensus_rule, others_rule), key=lambda r: (private[r], r))
    cheaper = np.flatnonzero(private < private[best_known] - TIE_TOLERANCE)
    for rule in dict.fromkeys((others_rule, consensus_rule)):  # once when e = o
        if len(cheaper):
            distance = np.maximum(source.private_linear[cheaper] + source.change_at(rule, cheaper), 0.0)
            cheaper = cheaper[others_risks[cheaper] <= others_risks[rule] + weight * distance + TIE_TOLERANCE]
    candidates = _by_private_risk(cheaper, private)

    target, exact, checks, untested_floor = best_known, True, 0, 0.0
    for candidate in candidates:
        if checks >= budget:
            exact, untested_floor = False, float(private[candidate])
            break
        checks += 1
        if source.reaches(global_linear, weight, *source.towards(int(candidate)), int(candidate)):
            target = int(candidate)
            break

    disagreement = float(private[consensus_rule])
    gain_lower = max(0.0, disagreement - float(private[target]))
    gain_upper = gain_lower if exact else max(gain_lower, disagreement - untested_floor)
    lie_lower, lie_upper = _cheapest_lie(source, own, target, consensus_rule, global_linear)
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
        damage=max(0.0, float(others_risks[target] + weight * private[target] - consensus.risk)),  # the global risk's float at target
        checks=checks,
        pull=max(0.0, float(others_risks[consensus_rule] - others_risks[others_rule])),
        others_rule=int(others_rule),
    )


def incentives(
    matrix: LabelMatrix, rule_class: RuleClass, consensus: ConsensusFit, budget: int | None = DEFAULT_THRESHOLD_BUDGET
) -> list[SourceIncentive]:
    """:func:`source_incentive` for every source, in source order."""
    shared = incentive_context(matrix, rule_class)
    return [analyse_source(shared, own, rule_class, consensus, budget) for own in matrix.sources]
