"""The mechanism registry: one entry per mechanism, its kind, where it applies, its lottery
and its worst-case guarantee.

Each entry of :data:`MECHANISM_REGISTRY` is one of three kinds, and the kind says how the
lottery is built from the entry's own function:

* :class:`ConsensusMechanism` (``erm``): the consensus fit with probability 1.
* :class:`DictatorLottery`: source ``j`` is drawn with ``p_j = a_j / sum_k a_k`` for the
  entry's ``scores`` function ``a`` of the registry weights, and gets its own best rule.
* :class:`TwoRuleMechanism`: all-1 with the entry's ``probability_one(t)`` of the vote
  share ``t``, else all-0; accepts only the constant class of exactly two rules.

Every entry also says which rule classes and how many rules it accepts, whether it is
strategy-proof, and its ``guarantee`` function. :mod:`truthsieve.core.mechanisms` runs
the entries; ``pipeline/config.py`` validates ``mechanism`` against the same registry
(unknown names, the rule-class and rule-count limits, ``strategy_proof: False`` under
``routing.mode: strategy_proof``). **Adding a mechanism is one entry in**
:data:`MECHANISM_REGISTRY`; the derivations of the guarantees are in
:mod:`truthsieve.core.mechanisms`' docstring.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, ClassVar, Literal

import numpy as np

from truthsieve.core.labels import LabelMatrix
from truthsieve.core.statistics import TIE_TOLERANCE
from truthsieve.core.registry import Registry
from truthsieve.core.rules import RULE_CLASSES, RuleClass
from truthsieve.core.statistics import FloatArray, SourceLabels, shared_inputs

if TYPE_CHECKING:
    from truthsieve.core.mechanisms import ConsensusFit


def own_best_rule(source: SourceLabels, rule_class: RuleClass) -> int:
    """A source's ERM on its own labels alone (its dictator rule): O(K |S_i|) plus the cuts."""
    return rule_class.fit(source.sparse_costs(rule_class.n_classes), items=source.items)


def dictator_guarantee(probabilities: FloatArray, weights: FloatArray) -> float:
    """Worst-case ratio ``1 + 2 max_i p_i (1 - w_i) / w_i`` of a fixed dictator lottery."""
    if len(weights) == 1:
        return 1.0
    return float(1.0 + 2.0 * np.max(probabilities * (1.0 - weights) / weights))


def _equal_scores(present: FloatArray, registry_total: float) -> FloatArray:
    return np.ones(len(present))


def _weight_scores(present: FloatArray, registry_total: float) -> FloatArray:
    return present.copy()


def _tuned_scores(present: FloatArray, registry_total: float) -> FloatArray:
    if len(present) == 1:
        return np.ones(1)  # also the case share = 1 (a registry of one source)
    shares = present / registry_total
    odds: FloatArray = shares / (1.0 - shares)
    return odds


def two_rule_vote_share(matrix: LabelMatrix | Sequence[SourceLabels]) -> float:
    """``t``: the normalised weight of sources whose item-weighted majority label is 1."""
    sources = matrix.sources if isinstance(matrix, LabelMatrix) else matrix
    # A source prefers all-1 when predicting 0 would cost it more; exact ties vote 0.
    votes_one = np.array(
        [s.shares[s.classes != 0].sum() > s.shares[s.classes != 1].sum() + TIE_TOLERANCE for s in sources], dtype=bool
    )
    weights = np.array([s.weight for s in sources], dtype=np.float64)
    return float(weights[votes_one].sum())


def two_rule_vote_probability_one(t: float) -> float:
    """P(all-1) of the two-rule vote for vote share ``t``: 1 for a strict majority, ties vote 0."""
    return 1.0 if t > 0.5 + TIE_TOLERANCE else 0.0


def two_rule_lottery_probability_one(t: float) -> float:
    """P(all-1) of the two-rule lottery for vote share ``t``."""
    if t <= 0.5:
        return t / (2.0 * (1.0 - t))
    return 1.0 - (1.0 - t) / (2.0 * t)


def constant_guarantee(ratio: float) -> Callable[[FloatArray, FloatArray], float]:
    """A guarantee function for a mechanism whose worst-case ratio is one number."""

    def guarantee(probabilities: FloatArray, weights: FloatArray) -> float:
        return ratio

    return guarantee


MechanismKind = Literal["erm", "dictator lottery", "two-rule"]
Draws = list[tuple[str | None, float, int]]  # (source_id or None, probability, rule)
_NUMBER_WORDS = {1: "one", 2: "two", 3: "three", 4: "four"}


def number_word(n: int) -> str:
    """``2`` -> ``"two"`` for the small counts messages name; larger ones as digits."""
    return _NUMBER_WORDS.get(n, str(n))


@dataclass(frozen=True, kw_only=True)
class MechanismSpec:
    """One mechanism of :data:`MECHANISM_REGISTRY`: what it is, where it applies, its guarantee.

    :param guarantee: ``guarantee(p, w)``, the worst-case ratio to ``r*`` with ``p`` the
        draw probabilities of the sources present (dictator lotteries; empty otherwise)
        and ``w`` their normalised weights.
    :param strategy_proof: False refuses the mechanism under ``routing.mode: strategy_proof``.
    :param rule_classes: the rule-class kinds it accepts; None: every registered kind.
    :param rule_count: the exact number of rules the class must have; None: any.
    """

    kind: ClassVar[MechanismKind]
    name: str
    description: str
    guarantee: Callable[[FloatArray, FloatArray], float]
    strategy_proof: bool = True
    rule_classes: tuple[str, ...] | None = None
    rule_count: int | None = None

    def accepted_kinds(self) -> tuple[str, ...]:
        return tuple(RULE_CLASSES.names()) if self.rule_classes is None else self.rule_classes

    def refusal(self, kind: str, size: int) -> str | None:
        """Why the mechanism cannot run on a ``kind`` class of ``size`` rules, or None."""
        if kind in self.accepted_kinds() and (self.rule_count is None or size == self.rule_count):
            return None
        needs = " or ".join(self.accepted_kinds()) + " rule class"
        if self.rule_count is not None:
            needs += f" of exactly {number_word(self.rule_count)} rules"
        return f"{self.name} needs the {needs}, not {kind!r} with {size} rules"

    def draws(
        self,
        sources: Sequence[SourceLabels],
        rule_class: RuleClass,
        consensus: ConsensusFit,
        registry_weights: Mapping[str, float] | None,
        own_rules: Mapping[str, int] | None = None,
    ) -> tuple[Draws, float, bool]:
        """The lottery, tonight's guarantee, and whether the guarantee applies.

        :param own_rules: each source's own best rule where already known (the incentive
            analysis finds it, ``SourceIncentive.own_best_rule``: the same first minimum of
            the same floats); :func:`own_best_rule` for the sources not in it.
        """
        raise NotImplementedError

    def registry_guarantee(self, registry_weights: FloatArray) -> float:
        """Worst-case ratio when every registered source takes part."""
        weights = np.asarray(registry_weights, dtype=np.float64)
        return self.guarantee(np.zeros(0), weights / weights.sum())


@dataclass(frozen=True, kw_only=True)
class ConsensusMechanism(MechanismSpec):
    """The consensus fit itself."""

    kind: ClassVar[MechanismKind] = "erm"

    def draws(
        self,
        sources: Sequence[SourceLabels],
        rule_class: RuleClass,
        consensus: ConsensusFit,
        registry_weights: Mapping[str, float] | None,
        own_rules: Mapping[str, int] | None = None,
    ) -> tuple[Draws, float, bool]:
        weights = np.array([s.weight for s in sources], dtype=np.float64)
        return [(None, 1.0, consensus.rule)], self.guarantee(np.zeros(0), weights), True


@dataclass(frozen=True, kw_only=True)
class DictatorLottery(MechanismSpec):
    """Source ``j`` drawn with ``p_j = a_j / sum_k a_k``; it gets its own best rule.

    :param scores: ``scores(present, registry_total)``, the fixed score ``a_j > 0`` of each
        present source from the registry weights alone (see the module docstring).
    """

    kind: ClassVar[MechanismKind] = "dictator lottery"
    scores: Callable[[FloatArray, float], FloatArray]
    guarantee: Callable[[FloatArray, FloatArray], float] = dictator_guarantee

    def probabilities(self, present: FloatArray, registry_total: float | None = None) -> FloatArray:
        """``p_j = a_j / sum_k a_k`` over the sources present (weights need not be normalised)."""
        if len(present) == 1:
            return np.ones(1)
        present = np.asarray(present, dtype=np.float64)
        scores = self.scores(present, float(present.sum()) if registry_total is None else float(registry_total))
        probabilities: FloatArray = scores / scores.sum()
        return probabilities

    def draws(
        self,
        sources: Sequence[SourceLabels],
        rule_class: RuleClass,
        consensus: ConsensusFit,
        registry_weights: Mapping[str, float] | None,
        own_rules: Mapping[str, int] | None = None,
    ) -> tuple[Draws, float, bool]:
        weights = np.array([s.weight for s in sources], dtype=np.float64)
        total: float | None
        if registry_weights is None:
            present, total = weights, None
        else:
            present = np.array([float(registry_weights[s.source_id]) for s in sources])
            total = float(sum(registry_weights.values()))
        probabilities = self.probabilities(present, total)
        known = own_rules or {}
        rules = [known[s.source_id] if s.source_id in known else own_best_rule(s, rule_class) for s in sources]
        draws: Draws = [(s.source_id, float(p), int(r)) for s, p, r in zip(sources, probabilities, rules)]
        return draws, self.guarantee(probabilities, weights), shared_inputs(sources) or len(sources) == 1

    def registry_guarantee(self, registry_weights: FloatArray) -> float:
        weights = np.asarray(registry_weights, dtype=np.float64)
        return self.guarantee(self.probabilities(weights), weights / weights.sum())


@dataclass(frozen=True, kw_only=True)
class TwoRuleMechanism(MechanismSpec):
    """A lottery over all-0 and all-1 from the vote share ``t`` (:func:`two_rule_vote_share`).

    :param probability_one: ``P(all-1)`` as a function of ``t``.
    """

    kind: ClassVar[MechanismKind] = "two-rule"
    probability_one: Callable[[float], float]
    rule_classes: tuple[str, ...] | None = ("constant",)
    rule_count: int | None = 2

    def draws(
        self,
        sources: Sequence[SourceLabels],
        rule_class: RuleClass,
        consensus: ConsensusFit,
        registry_weights: Mapping[str, float] | None,
        own_rules: Mapping[str, int] | None = None,
    ) -> tuple[Draws, float, bool]:
        p_one = self.probability_one(two_rule_vote_share(sources))
        weights = np.array([s.weight for s in sources], dtype=np.float64)
        return [(None, 1.0 - p_one, 0), (None, p_one, 1)], self.guarantee(np.zeros(0), weights), True


# Adding a mechanism is one entry here; the order is the configuration's list of names.
MECHANISM_REGISTRY: Registry[MechanismSpec] = Registry(
    "mechanism",
    [
        ConsensusMechanism(
            name="erm", description="the consensus fit itself; a reference", guarantee=constant_guarantee(1.0), strategy_proof=False
        ),
        DictatorLottery(name="random_dictator", description="source drawn uniformly", scores=_equal_scores),
        DictatorLottery(name="weighted_dictator", description="source drawn with probability w_i", scores=_weight_scores),
        DictatorLottery(name="tuned_dictator", description="source drawn with probability ~ v_i / (1 - v_i)", scores=_tuned_scores),
        TwoRuleMechanism(
            name="two_rule_vote",
            description="weighted majority vote between all-0 and all-1",
            probability_one=two_rule_vote_probability_one,
            guarantee=constant_guarantee(3.0),
        ),
        TwoRuleMechanism(
            name="two_rule_lottery",
            description="lottery between all-0 and all-1 from the vote share",
            probability_one=two_rule_lottery_probability_one,
            guarantee=constant_guarantee(2.0),
        ),
    ],
)
# Live views of the registry's names (a registered mechanism shows up at once).
MECHANISMS = MECHANISM_REGISTRY.names()
DICTATORS = MECHANISM_REGISTRY.names(lambda m: m.kind == "dictator lottery")


