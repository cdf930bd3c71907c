"""The threshold class over ``K`` classes: one feature, one cut, a class on each side.

Each feature is sorted once when the class is built and every item
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

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import numpy.typing as npt

from truthsieve.core.statistics import TIE_TOLERANCE
from truthsieve.core.rule_class import RuleClass, RuleForm, class_totals
from truthsieve.core.statistics import FloatArray, IntArray
from truthsieve.exceptions import RuleClassError

if TYPE_CHECKING:
    import pandas as pd


@dataclass(frozen=True)
class _SortedFeature:
    name: str
    cuts: FloatArray  # midpoints, increasing
    values: FloatArray  # the feature, in item order
    bins: npt.NDArray[np.int32]  # per item (item order): how many cuts lie below its value


STACKED_SLOTS = 1 << 21
"""The class keeps every item's cut slot of every feature in one ``(d, m)`` array when
``d m`` is at most this (16 MiB); a larger class scores feature by feature."""


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
            # The sort order and split positions are not kept: the bins carry all the
            # fit needs (at 10M items, 160 MB less per feature).
            self.features.append(_SortedFeature(str(name), cuts, values, bins))
        if not self.features:
            raise RuleClassError(
                "threshold class has no usable feature: every configured feature is "
                "constant across the items"
            )
        per_cut = len(self.pairs)
        self.offsets = np.cumsum([n_classes] + [per_cut * len(f.cuts) for f in self.features])
        self.size = int(self.offsets[-1])
        # Feature f's cut bin k is slot slot_starts[f] + k (one slot past its cuts); its
        # cuts are rows cut_starts[f] .. of the stacked Δ (see _flat_deltas).
        counts = [len(f.cuts) for f in self.features]
        self._slot_starts = np.cumsum([0] + [c + 1 for c in counts])
        self._cut_starts = np.cumsum([0] + counts)
        self._slots: IntArray | None = None
        if len(self.features) * self.n_items <= STACKED_SLOTS:
            self._slots = np.stack([f.bins.astype(np.intp) + s for f, s in zip(self.features, self._slot_starts)])

    def _deltas(self, costs: FloatArray, items: IntArray | None) -> tuple[FloatArray, list[FloatArray]]:
        """``T`` and, per feature, ``Δ`` of shape ``(cuts, K)`` (``Δ[:, 0] = 0``)."""
        totals, blocks = self._delta_blocks(costs, items)
        if len(blocks) == 1 and len(self.features) > 1:
            flat = blocks[0][0]
            return totals, [flat[a:b] for a, b in zip(self._cut_starts[:-1], self._cut_starts[1:])]
        return totals, [delta for delta, _, _ in blocks]

    def _delta_blocks(self, costs: FloatArray, items: IntArray | None) -> tuple[FloatArray, list[tuple[FloatArray, int, int]]]:
        """``T`` and blocks ``(Δ, start, stop)``: rules ``start .. stop`` are Δ's cuts times
        the pairs, cut-major. One block of every feature's cuts when the class keeps the
        stacked slots (the same floats, a few NumPy calls instead of several per feature)."""
        costs = np.asarray(costs, dtype=np.float64)
        totals = class_totals(costs)
        difference = costs[:, 1:] - costs[:, :1]
        if self._slots is not None:
            return totals, [(self._flat_deltas(difference, items), self.n_classes, self.size)]
        deltas = []
        for feature in self.features:
            n_cuts = len(feature.cuts)
            bins = feature.bins if items is None else feature.bins[items]
            delta = np.zeros((n_cuts, self.n_classes))
            for b in range(1, self.n_classes):
                column = np.ascontiguousarray(difference[:, b - 1])
                delta[:, b] = np.cumsum(np.bincount(bins, weights=column, minlength=n_cuts + 1)[:n_cuts])
            deltas.append(delta)
        return totals, [(d, int(a), int(b)) for d, a, b in zip(deltas, self.offsets[:-1], self.offsets[1:])]

    def _flat_deltas(self, difference: FloatArray, items: IntArray | None) -> FloatArray:
        """Every feature's ``Δ`` stacked, ``(total cuts, K)``: the floats of the per-feature
        loop. One ``bincount`` per class over all features' slots adds each bin's items in
        item order from 0.0, as a feature's own ``bincount`` does (no other feature shares
        its slots); each feature's prefix sum then runs from 0.0 (``np.add.accumulate``, what
        ``np.cumsum`` calls)."""
        assert self._slots is not None
        slots = (self._slots if items is None else np.take(self._slots, items, axis=1)).ravel()
        n_slots, n_features = int(self._slot_starts[-1]), len(self.features)
        starts = list(zip(self._slot_starts[:-1].tolist(), self._cut_starts[:-1].tolist(), self._cut_starts[1:].tolist()))
        prefix = np.empty((self.n_classes - 1, int(self._cut_starts[-1])))  # row b - 1: Δ(b)
        for b in range(1, self.n_classes):
            weights = np.broadcast_to(difference[:, b - 1], (n_features, len(difference))).ravel()
            sums = np.bincount(slots, weights=weights, minlength=n_slots)
            for slot, low, high in starts:
                np.add.accumulate(sums[slot : slot + high - low], out=prefix[b - 1, low:high])
        delta = np.zeros((prefix.shape[1], self.n_classes))
        delta[:, 1:] = prefix.T
        return delta

    def _parts(
        self, costs: FloatArray, items: IntArray | None
    ) -> tuple[FloatArray, list[tuple[FloatArray, FloatArray]]]:
        """``T`` and, per feature, ``(α, Δ)`` of shape ``(cuts, K)`` (``Δ[:, 0] = 0``)."""
        totals, deltas = self._deltas(costs, items)
        return totals, [(self._alpha(totals, delta), delta) for delta in deltas]

    def _alpha(self, totals: FloatArray, delta: FloatArray) -> FloatArray:
        alpha = np.empty((len(delta), self.n_classes))
        alpha[:, 0] = totals[0]
        alpha[:, 1:] = totals[1:] - delta[:, 1:]
        return alpha

    @staticmethod
    def _pair_risks(alpha: FloatArray, delta: FloatArray, above: IntArray, below: IntArray) -> FloatArray:
        # b = 0 adds nothing (Δ(0) = 0), so K = 2 keeps the former floats exactly.
        out: FloatArray = alpha[:, above]
        adds = below > 0
        out[:, adds] += delta[:, below[adds]]
        return out

    def linear_risks(self, costs: FloatArray, items: IntArray | None = None) -> FloatArray:
        totals, blocks = self._delta_blocks(costs, items)
        out = np.empty(self.size)
        out[: self.n_classes] = totals
        for delta, start, stop in blocks:
            # The floats of _pair_risks(α, Δ, ...), written in place pair by pair: α(a) is
            # T(0) for a = 0, else T(a) - Δ(a); the pair adds Δ(b) unless b = 0.
            block = out[start:stop].reshape(len(delta), len(self.pairs))
            alpha = [np.full(len(delta), totals[0])] + [totals[a] - delta[:, a] for a in range(1, self.n_classes)]
            for column, (above, below) in enumerate(self.pairs):
                if below == 0:
                    block[:, column] = alpha[above]
                else:
                    np.add(alpha[above], delta[:, below], out=block[:, column])
        return out

    def linear_risks_at(self, costs: FloatArray, items: IntArray | None, rules: IntArray) -> FloatArray:
        """``linear_risks(costs, items)[rules]``, the same floats, scoring only the features
        that ``rules`` use and no pair matrix."""
        costs = np.asarray(costs, dtype=np.float64)
        totals = class_totals(costs)
        difference = costs[:, 1:] - costs[:, :1]
        out = np.empty(len(rules))
        constant = rules < self.n_classes
        out[constant] = totals[rules[constant]]
        if self._slots is not None:  # every feature's Δ in a few calls (_flat_deltas), read at the rules' cuts
            chosen = np.flatnonzero(~constant)
            if len(chosen):
                row, pair = np.divmod(rules[chosen] - self.n_classes, len(self.pairs))
                delta = self._flat_deltas(difference, items)[row]
                out[chosen] = self._risks_of_pairs(totals, delta, pair)
            return out
        block = np.searchsorted(self.offsets, rules, side="right") - 1
        for number in np.unique(block[~constant]):
            feature, chosen = self.features[number], np.flatnonzero(block == number)
            cut, pair = np.divmod(rules[chosen] - self.offsets[number], len(self.pairs))
            bins = feature.bins if items is None else feature.bins[items]
            delta = np.zeros((len(chosen), self.n_classes))
            for b in range(1, self.n_classes):
                column = np.ascontiguousarray(difference[:, b - 1])
                sums = np.bincount(bins, weights=column, minlength=len(feature.cuts) + 1)[: len(feature.cuts)]
                delta[:, b] = np.cumsum(sums)[cut]
            out[chosen] = self._risks_of_pairs(totals, delta, pair)
        return out

    def _risks_of_pairs(self, totals: FloatArray, delta: FloatArray, pair: IntArray) -> FloatArray:
        """Row ``j``'s risk of pair ``pair[j]`` from its cut's ``Δ`` row (the floats of linear_risks)."""
        rows, above, below = np.arange(len(pair)), self.pairs[pair, 0], self.pairs[pair, 1]
        alpha = np.where(above == 0, totals[0], totals[above] - delta[rows, above])
        result: FloatArray = np.where(below == 0, alpha, alpha + delta[rows, below])
        return result

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
        if self.n_classes == 2:
            # The two pairs are (0, 1) and (1, 0): the general branch below picks exactly
            # these floats (its argsorts only decide which of the two is smaller).
            two: FloatArray = np.minimum(alpha[:, 0] + delta[:, 1], alpha[:, 1])
            return two
        rows = np.arange(len(alpha))
        order_a = np.argsort(alpha, axis=1, kind="stable")[:, :2]
        order_b = np.argsort(delta, axis=1, kind="stable")[:, :2]
        a1, a2, b1, b2 = order_a[:, 0], order_a[:, 1], order_b[:, 0], order_b[:, 1]

        def risk(a: IntArray, b: IntArray) -> FloatArray:
            out: FloatArray = np.where(b == 0, alpha[rows, a], alpha[rows, a] + delta[rows, b])
            return out

        distinct = risk(a1, b1)
        # When a1 = b1 = c the constant rule c is at least as good (in exact arithmetic),
        # so this branch rarely decides the fit; it keeps the value exact all the same.
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
