"""Source ``i``'s flips, and the reachability check on them without scoring every rule.

**Incremental scoring.** If ``i`` reports ``z`` instead of ``y_i``, its cost array
changes only on the flipped set ``F = {j in S_i : z_j != y_ij}``: with
``s_j = u_j / U_i``, the column of the old class ``y_ij`` gains ``s_j`` (predicting it
is now wrong) and the column of the new class ``z_j`` loses ``s_j``; the other
``K - 2`` columns do not change. Risks are linear in the costs, so every rule's risk
under ``z`` is the base risk plus ``linear_risks`` of that change on ``F``
(:meth:`FlipSource.flip_change`): a ``bincount`` of ``F``'s cut bins per feature and
class, O(d K |F| + cuts K²), instead of a full pass.

**Reachability by segments** (:func:`threshold_reaches`, the threshold class). ERM on
the others plus the flipped report returns the first rule ``r`` with
``risk_r <= min + TIE_TOLERANCE``, ``risk_r = max(fl(R_r + fl(w c_r)), 0)``, ``R`` the
night's unclipped global risks and ``c`` the change above. Within one feature,
``c_r`` of rule ``(cut k, pair p)`` is ``α_k(a) + Δ_k(b)``, and ``Δ_k`` only moves at the
cut bins that hold a flipped item: ``Δ_k = Δ_{k-1} + 0.0`` for an empty bin, the same
value. So the cuts split into at most ``|F| + 1`` segments per feature on which every
pair's change is one float ``C``, and since ``x -> max(fl(x + C'), 0)`` is monotone
non-decreasing (IEEE rounding is monotone), the least risk of a segment is
``max(fl(min_k R + fl(w C)), 0)``: exactly the float the full pass would find there.
``np.minimum.reduceat`` over the segments gives ``min_k R`` in one pass over ``R``
(comparisons, no arithmetic), and the change itself is computed by the very
operations of :meth:`ThresholdRules.linear_risks`, only at each segment's first cut.
The target's own cut is made a segment of its own; the target is ERM's answer iff
its risk is within the tolerance of the least and every rule before it is not. Same
booleans as scoring every rule (``tests/core/test_flips.py`` compares both), at
O(d (|F| + cuts)) arithmetic per check instead of O(d cuts K²) plus four passes over
every rule.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from truthsieve.core.statistics import TIE_TOLERANCE
from truthsieve.core.rule_class import RuleClass, class_totals, first_minimum
from truthsieve.core.statistics import FloatArray, IntArray, SourceLabels
from truthsieve.core.threshold_rules import ThresholdRules


SPARSE_FLIPS = 10
""":meth:`FlipSource.reaches` goes by segments when ``d |F| SPARSE_FLIPS`` is below the
number of cuts (each segment costs more than a cut of the full pass), else scores every rule."""


class FlipSource:
    """Source ``i``'s private costs, kept on its own items ``S_i`` only."""

    def __init__(self, own: SourceLabels, rule_class: RuleClass) -> None:
        self.items = own.items
        self.truth = own.classes
        self.shares = own.shares
        self.item_weights = own.item_weights
        self.rule_class = rule_class
        self.private_linear = rule_class.linear_risks(own.sparse_costs(rule_class.n_classes), items=self.items)
        self._towards: tuple[int, IntArray, IntArray] | None = None

    def change_rows(self, positions: IntArray, classes: IntArray) -> FloatArray:
        """``(|F|, K)`` change of the private costs when the labels at ``positions``
        (indices into ``self.items``) become ``classes``."""
        shares = self.shares[positions]
        rows = np.arange(len(positions))
        change = np.zeros((len(positions), self.rule_class.n_classes))
        change[rows, self.truth[positions]] = shares
        change[rows, classes] = -shares
        return change

    def flip_change(self, positions: IntArray, classes: IntArray) -> FloatArray:
        """Change of every rule's private risk when the labels at ``positions`` become ``classes``."""
        return self.rule_class.linear_risks(self.change_rows(positions, classes), items=self.items[positions])

    def towards(self, rule: int) -> tuple[IntArray, IntArray]:
        """Positions in ``S_i`` where ``rule`` differs from ``y_i``, and ``rule``'s classes
        there: O(|S_i|)."""
        if self._towards is None or self._towards[0] != rule:  # the last rule's answer is kept
            predicted = self.rule_class.predict(rule, self.items)
            positions = np.flatnonzero(predicted != self.truth)
            self._towards = (rule, positions, predicted[positions])
        return self._towards[1], self._towards[2]

    def change_to(self, rule: int) -> FloatArray:
        """Change of every rule's R_i if the source reported ``rule``'s labels."""
        return self.flip_change(*self.towards(rule))

    def change_at(self, rule: int, rules: IntArray) -> FloatArray:
        """``change_to(rule)[rules]``, the same floats; for thresholds without scoring every rule."""
        if not isinstance(self.rule_class, ThresholdRules):
            return self.change_to(rule)[rules]
        positions, classes = self.towards(rule)
        return self.rule_class.linear_risks_at(self.change_rows(positions, classes), self.items[positions], rules)

    def reaches(self, global_linear: FloatArray, weight: float, positions: IntArray, classes: IntArray, target: int) -> bool:
        """Whether ERM returns ``target`` when the labels at ``positions`` become ``classes``."""
        rules = self.rule_class
        if isinstance(rules, ThresholdRules) and len(positions) * len(rules.features) * SPARSE_FLIPS < cut_bases(rules)[-1]:
            change = self.change_rows(positions, classes)
            return threshold_reaches(rules, global_linear, weight, change, global_bins(rules, self.items[positions]), target)
        return full_reaches(global_linear, weight, self.flip_change(positions, classes), target)


def full_reaches(global_linear: FloatArray, weight: float, change: FloatArray, target: int) -> bool:
    """The check by scoring every rule: ``risks(G + w costs(z)) = R + w (change of R_i)``."""
    risks = global_linear + weight * change
    return first_minimum(np.maximum(risks, 0.0, out=risks)) == target


def global_bins(rule_class: ThresholdRules, items: IntArray) -> IntArray:
    """``(d, len(items))`` cut bins numbered across features (feature ``f``'s cut ``k`` is
    ``base_f + k``, :func:`cut_bases`); an item above every cut of its feature gets
    ``total_cuts``, which no segment reads."""
    bases = cut_bases(rule_class)
    out = np.empty((len(rule_class.features), len(items)), dtype=np.int64)
    for number, feature in enumerate(rule_class.features):
        bins = feature.bins[items].astype(np.int64)
        out[number] = np.where(bins < len(feature.cuts), bins + bases[number], bases[-1])
    return out


def cut_bases(rule_class: ThresholdRules) -> IntArray:
    """Global number of each feature's first cut, then the total number of cuts."""
    bases: IntArray = (rule_class.offsets - rule_class.n_classes) // len(rule_class.pairs)
    return bases


def threshold_reaches(
    rule_class: ThresholdRules, global_linear: FloatArray, weight: float, costs: FloatArray, bins: IntArray, target: int
) -> bool:
    """:func:`full_reaches` of ``rule_class.linear_risks(costs, items)`` by segments (module
    docstring); ``bins`` is :func:`global_bins` of ``items``."""
    n_classes, n_pairs = rule_class.n_classes, len(rule_class.pairs)
    bases = cut_bases(rule_class)
    total_cuts = int(bases[-1])
    totals = class_totals(costs)
    difference = costs[:, 1:] - costs[:, :1]
    occupied, sums = _bin_sums(bins.ravel(), difference, len(bins), total_cuts)
    # Segments start at each feature's first cut and at every occupied bin; the target's cut
    # is a segment of its own.
    marks = [bases[:-1], occupied]
    target_row = -1
    if target >= n_classes:
        target_row = (target - n_classes) // n_pairs
        marks.append(np.array([target_row, target_row + 1]))
    first_cuts = _distinct(np.concatenate(marks))
    first_cuts = first_cuts[first_cuts < total_cuts]
    # Δ at a segment's first cut: the feature's prefix sum of the bin sums (from 0.0, in bin
    # order, as np.cumsum runs in ThresholdRules._deltas) up to its last occupied bin at or
    # below that cut; 0.0 before the feature's first occupied bin.
    bounds = np.searchsorted(occupied, bases)
    prefix = np.zeros((len(occupied) + len(bases) - 1, n_classes - 1))
    for number in range(len(bases) - 1):
        low, high = int(bounds[number]), int(bounds[number + 1])
        prefix[low + number + 1 : high + number + 1] = np.cumsum(sums[low:high], axis=0)
    feature_of = np.searchsorted(bases, first_cuts, side="right") - 1
    last = np.searchsorted(occupied, first_cuts, side="right") + feature_of  # row in `prefix`
    delta = np.zeros((len(first_cuts), n_classes))
    delta[:, 1:] = prefix[last]
    alpha = np.empty_like(delta)
    alpha[:, 0] = totals[0]
    alpha[:, 1:] = totals[1:] - delta[:, 1:]
    change = ThresholdRules._pair_risks(alpha, delta, rule_class.pairs[:, 0], rule_class.pairs[:, 1])
    least = np.minimum.reduceat(global_linear[n_classes:].reshape(-1, n_pairs), first_cuts, axis=0)
    segment_risks = least + weight * change
    np.maximum(segment_risks, 0.0, out=segment_risks)
    constant_risks = global_linear[:n_classes] + weight * totals
    np.maximum(constant_risks, 0.0, out=constant_risks)
    limit = min(constant_risks.min(), segment_risks.min()) + TIE_TOLERANCE
    if target < n_classes:
        return bool(constant_risks[target] <= limit and not (constant_risks[:target] <= limit).any())
    if (constant_risks <= limit).any():
        return False
    row = int(np.searchsorted(first_cuts, target_row))
    target_pair = (target - n_classes) % n_pairs
    if (segment_risks[:row] <= limit).any() or (segment_risks[row, :target_pair] <= limit).any():
        return False
    return bool(segment_risks[row, target_pair] <= limit)


def _bin_sums(bins: IntArray, difference: FloatArray, n_features: int, total_cuts: int) -> tuple[IntArray, FloatArray]:
    """The occupied cut bins (increasing, ``total_cuts`` left out) and, per class
    ``b >= 1``, the sum of ``difference[:, b - 1]`` over each. ``bins`` is feature-major
    (``d`` runs over the flipped items), so every bin's items are added in the flipped
    order from 0.0, exactly as ``np.bincount`` sums them in ``ThresholdRules._deltas``."""
    inside = bins < total_cuts
    occupied = _distinct(bins[inside])
    inverse = np.searchsorted(occupied, bins[inside])
    sums = [
        np.bincount(inverse, weights=np.tile(difference[:, b], n_features)[inside], minlength=len(occupied))
        for b in range(difference.shape[1])
    ]
    return occupied, np.column_stack(sums)


def _distinct(values: IntArray) -> IntArray:
    """The distinct values, increasing (``np.unique`` without its hashing overhead)."""
    ordered = np.sort(values)
    keep = np.ones(len(ordered), dtype=bool)
    keep[1:] = ordered[1:] != ordered[:-1]
    result: IntArray = ordered[keep]
    return result
