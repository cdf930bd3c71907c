"""The consensus fit and the strategy-proof lotteries over rules.

A mechanism maps every source's labels to a **lottery**: rules with probabilities
summing to 1. Expected risk and ratio are computed exactly from the lottery (no
sampling). Mechanisms:

* ``erm``: the consensus fit itself, ``argmin_c R(c)``; a reference, not strategy-proof.
* dictator lotteries: source ``i`` is drawn with a fixed probability ``p_i`` and gets
  its own ERM on its own labels (whose tie-break depends only on the items). Nothing a
  source reports changes ``p`` or any other source's rule, and its own ERM is the best
  it can get, so truthful reporting is a dominant strategy. With shared inputs the
  triangle inequality on the weighted Hamming distance gives, for every fixed ``p``,

      E[R] <= r* * (1 + 2 * max_i p_i (1 - w_i) / w_i),

  with ``w`` the weights normalised over the sources present. That is ``3 - 2/n`` for
  ``random_dictator`` with equal weights, ``3 - 2 min w`` for ``weighted_dictator``
  and ``1 + 2 / sum_j w_j/(1 - w_j)`` for ``tuned_dictator`` when every registered
  source is present ("Algorithms for strategyproof classification", Artificial
  Intelligence 186, 2012). The guarantee is always recomputed from this general
  formula with the probabilities actually used for the sources present.

* ``two_rule_vote`` and ``two_rule_lottery`` for the ``constant`` class: each source
  votes its item-weighted majority label; with ``t`` the weight voting 1 the vote
  picks all-1 when ``t > 1/2`` (ties: all-0), the lottery puts ``t / (2(1 - t))`` on
  all-1 for ``t <= 1/2`` and ``(1 - t) / (2t)`` on all-0 for ``t >= 1/2``. Worst-case
  ratios 3 and 2 ("Strategyproof classification under
  constant hypotheses: a tale of two functions", AAAI 2008); these need no shared
  inputs since each source's preference is one number.

**Participation** (no source lowers its expected risk by staying away). Every dictator
lottery here has the form ``p_j = a_j / sum_{k present} a_k`` with a fixed *score*
``a_j > 0`` that depends on the registry alone: ``a_j = 1`` (``random_dictator``),
``a_j = w_j`` (``weighted_dictator``) and, for ``tuned_dictator``,
``a_j = v_j / (1 - v_j)`` with ``v_j = w_j / sum_{k registered} w_k`` normalised over
*all registered* sources. Let ``P`` be the present sources other than ``i`` and
``A = sum_{k in P} a_k``. Without ``i`` the lottery is ``q_j = a_j / A``; with ``i`` it
is ``p_j = a_j / (A + a_i)`` for ``j in P`` and ``p_i = a_i / (A + a_i)``, so

    p = (1 - p_i) * q + p_i * [i's own best rule].

The other sources' rules do not change (each is its own ERM on its own labels, with a
tie-break on the items only), and ``i``'s own best rule minimises its true private risk
over the whole class, so ``E_p[R_i] = (1 - p_i) E_q[R_i] + p_i min_c R_i(c) <= E_q[R_i]``.
The old ``tuned_dictator`` renormalised the weights over the sources present before
taking ``w/(1 - w)``; that ratio is not proportional to ``w``, so one source's presence
changed the odds between the others and the mixture above failed (registry weights
A=6, i=2, B=C=1 with ``i`` agreeing with A: 0.113 present against 0.087 away).
The two-rule mechanisms also reward taking part: a source voting 1 moves ``t`` up by
joining (``(T + w_i)/(W + w_i) >= T/W``), a source voting 0 moves it down, and both
mechanisms' P(all-1) is non-decreasing in ``t``.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from truthsieve.core.labels import TIE_TOLERANCE, LabelMatrix, risk_is_zero
from truthsieve.core.rules import RuleClass, first_minimum
from truthsieve.exceptions import MechanismError


@dataclass(frozen=True)
class ConsensusFit:
    """The ERM over the global risk, and its risk ``r*``."""

    rule: int
    risk: float


@dataclass(frozen=True)
class LotteryEntry:
    source_id: str | None
    probability: float
    rule: int
    risk: float


@dataclass(frozen=True)
class MechanismResult:
    name: str
    lottery: tuple[LotteryEntry, ...]
    expected_risk: float
    ratio: float | None
    guarantee: float
    guarantee_applies: bool


def fit_consensus(matrix: LabelMatrix, rule_class: RuleClass) -> ConsensusFit:
    risks = rule_class.risks(*matrix.global_costs())
    best = first_minimum(risks)
    return ConsensusFit(rule=best, risk=float(risks[best]))


def own_best_rules(matrix: LabelMatrix, rule_class: RuleClass) -> np.ndarray:
    """Each source's ERM on its own labels alone (its dictator rule)."""
    return np.array([rule_class.fit(*matrix.source_costs(i)) for i in range(matrix.n_sources)])


def dictator_guarantee(probabilities: np.ndarray, weights: np.ndarray) -> float:
    """Worst-case ratio ``1 + 2 max_i p_i (1 - w_i) / w_i`` of a fixed dictator lottery."""
    if len(weights) == 1:
        return 1.0
    return float(1.0 + 2.0 * np.max(probabilities * (1.0 - weights) / weights))


def dictator_scores(name: str, present: np.ndarray, registry_total: float | None = None) -> np.ndarray:
    """The fixed score ``a_j`` of each present source (see the module docstring).

    :param present: registry weights (not normalised) of the sources present.
    :param registry_total: sum of the registry weights of *every* registered source;
        None means the sources present are the whole registry.
    """
    present = np.asarray(present, dtype=np.float64)
    if name == "random_dictator":
        return np.ones(len(present))
    if name == "weighted_dictator":
        return present.copy()
    if name == "tuned_dictator":
        total = float(present.sum()) if registry_total is None else float(registry_total)
        shares = present / total
        if len(present) == 1:
            return np.ones(1)  # also the case share = 1 (a registry of one source)
        return shares / (1.0 - shares)
    raise MechanismError(f"{name!r} is not a dictator mechanism")


def dictator_probabilities(name: str, weights: np.ndarray, registry_total: float | None = None) -> np.ndarray:
    """``p_j = a_j / sum_k a_k`` over the sources present (weights need not be normalised)."""
    if len(weights) == 1:
        return np.ones(1)
    scores = dictator_scores(name, weights, registry_total)
    return scores / scores.sum()


def registry_guarantee(name: str, registry_weights: np.ndarray) -> float:
    """Worst-case ratio of mechanism ``name`` when every registered source takes part.

    Depends on the configuration alone, so no source's labels or absence can move it.
    """
    weights = np.asarray(registry_weights, dtype=np.float64)
    if name == "erm":
        return 1.0
    if name == "two_rule_vote":
        return 3.0
    if name == "two_rule_lottery":
        return 2.0
    normalised = weights / weights.sum()
    return dictator_guarantee(dictator_probabilities(name, weights), normalised)


def two_rule_vote_share(matrix: LabelMatrix) -> float:
    """``t``: the normalised weight of sources whose item-weighted majority label is 1."""
    cost0, cost1 = (np.zeros(matrix.n_sources), np.zeros(matrix.n_sources))
    for i in range(matrix.n_sources):
        c0, c1 = matrix.source_costs(i)
        cost0[i], cost1[i] = c0.sum(), c1.sum()
    # A source prefers all-1 when predicting 0 would cost it more; exact ties vote 0.
    votes_one = cost0 > cost1 + TIE_TOLERANCE
    return float(matrix.source_weights[votes_one].sum())


def two_rule_lottery_probability_one(t: float) -> float:
    """P(all-1) of the two-rule lottery for vote share ``t``."""
    if t <= 0.5:
        return t / (2.0 * (1.0 - t))
    return 1.0 - (1.0 - t) / (2.0 * t)


MECHANISMS = ("erm", "random_dictator", "weighted_dictator", "tuned_dictator", "two_rule_vote", "two_rule_lottery")
DICTATORS = ("random_dictator", "weighted_dictator", "tuned_dictator")


def run_mechanism(
    name: str,
    matrix: LabelMatrix,
    rule_class: RuleClass,
    consensus: ConsensusFit | None = None,
    registry_weights: Mapping[str, float] | None = None,
) -> MechanismResult:
    """Run mechanism ``name`` and return its exact lottery, expected risk and ratio.

    :param registry_weights: registry weight of every *registered* source (present or
        not); ``tuned_dictator`` fixes its odds from them. None: the sources present are
        the whole registry.
    :raises MechanismError: unknown name, or a two-rule mechanism on another class.
    """
    if name not in MECHANISMS:
        raise MechanismError(f"unknown mechanism {name!r}; expected one of {', '.join(MECHANISMS)}")
    if name.startswith("two_rule") and rule_class.kind != "constant":
        raise MechanismError(f"{name} needs the constant rule class, not {rule_class.kind!r}")
    consensus = consensus or fit_consensus(matrix, rule_class)
    rule_risks = rule_class.risks(*matrix.global_costs())

    if name == "erm":
        entries = [(None, 1.0, consensus.rule)]
        guarantee, applies = 1.0, True
    elif name in DICTATORS:
        if registry_weights is None:
            present, total = matrix.source_weights, None
        else:
            present = np.array([float(registry_weights[s]) for s in matrix.source_ids])
            total = float(sum(registry_weights.values()))
        probabilities = dictator_probabilities(name, present, total)
        rules = own_best_rules(matrix, rule_class)
        entries = [(s, float(p), int(r)) for s, p, r in zip(matrix.source_ids, probabilities, rules)]
        guarantee = dictator_guarantee(probabilities, matrix.source_weights)
        applies = matrix.shared_inputs or matrix.n_sources == 1
    else:
        t = two_rule_vote_share(matrix)
        if name == "two_rule_vote":
            p_one = 1.0 if t > 0.5 + TIE_TOLERANCE else 0.0
            guarantee = 3.0
        else:
            p_one = two_rule_lottery_probability_one(t)
            guarantee = 2.0
        entries = [(None, 1.0 - p_one, 0), (None, p_one, 1)]
        applies = True

    lottery = tuple(LotteryEntry(s, p, r, float(rule_risks[r])) for s, p, r in entries)
    expected = float(sum(e.probability * e.risk for e in lottery))
    return MechanismResult(
        name=name,
        lottery=lottery,
        expected_risk=expected,
        ratio=risk_ratio(expected, consensus.risk),
        guarantee=guarantee,
        guarantee_applies=bool(applies),
    )


def risk_ratio(expected: float, optimum: float) -> float | None:
    """Expected risk over ``r*``: 1 when both are 0, None when only ``r*`` is 0."""
    if risk_is_zero(optimum):
        return 1.0 if risk_is_zero(expected) else None
    return expected / optimum
