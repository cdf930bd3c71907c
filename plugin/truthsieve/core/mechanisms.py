"""The consensus fit and the strategy-proof lotteries over rules.

A mechanism maps every source's labels to a **lottery**: rules with probabilities
summing to 1. Expected risk and ratio are computed exactly from the lottery (no
sampling). Mechanisms:

* ``erm``: the consensus fit itself, ``argmin_c R(c)``; a reference, not strategy-proof.
* dictator lotteries: source ``i`` is drawn with a fixed probability ``p_i`` and gets
  its own ERM on its own labels (whose tie-break depends only on the items). Nothing a
  source reports changes ``p`` or any other source's rule, and its own ERM is the best
  it can get, so truthful reporting is a dominant strategy, for any number ``K`` of
  classes (this step uses no property of the loss at all). With shared inputs the
  triangle inequality on the weighted Hamming distance gives, for every fixed ``p``,

      E[R] <= r* * (1 + 2 * max_i p_i (1 - w_i) / w_i),

  **for any K.** Under 0-1 loss, ``R_i(c) = d(c, y_i)`` with
  ``d(a, b) = sum_{j in S} u_j [a_j != b_j] / U`` on the shared items ``S``: a weighted
  sum of discrete metrics on the alphabet ``{0 .. K-1}``, hence a (pseudo)metric
  whatever ``K`` is. Let ``c*`` be the ERM, ``r* = sum_k w_k d(c*, y_k)`` and ``c_i``
  source ``i``'s own ERM, so ``d(c_i, y_i) <= d(c*, y_i)``. For ``k != i``,
  ``d(c_i, y_k) <= d(c_i, c*) + d(c*, y_k)`` and
  ``d(c_i, c*) <= d(c_i, y_i) + d(y_i, c*) <= 2 d(c*, y_i)``; hence
  ``R(c_i) <= w_i d(c*, y_i) + sum_{k != i} w_k (d(c*, y_k) + 2 d(c*, y_i))
  = r* + 2 (1 - w_i) d(c*, y_i)`` and
  ``E[R] = sum_i p_i R(c_i) <= r* + 2 sum_i [p_i (1 - w_i) / w_i] w_i d(c*, y_i)
  <= r* (1 + 2 max_i p_i (1 - w_i) / w_i)``. Only symmetry and the triangle
  inequality were used, so the binary bound carries over unchanged, and the binary
  instances that make it tight stay valid as a subdomain.

  with ``w`` the weights normalised over the sources present. That is ``3 - 2/n`` for
  ``random_dictator`` with equal weights, ``3 - 2 min w`` for ``weighted_dictator``
  and ``1 + 2 / sum_j w_j/(1 - w_j)`` for ``tuned_dictator`` when every registered
  source is present ("Algorithms for strategyproof classification", Artificial
  Intelligence 186, 2012). The guarantee is always recomputed from this general
  formula with the probabilities actually used for the sources present.

* ``two_rule_vote`` and ``two_rule_lottery`` for the ``constant`` class of two
  classes (exactly two rules; any other class is refused): each source
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

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from truthsieve.core.labels import LabelMatrix
from truthsieve.core.statistics import risk_is_zero
from truthsieve.core.mechanism_registry import (
    DICTATORS,
    MECHANISM_REGISTRY,
    MECHANISMS,
    ConsensusMechanism,
    DictatorLottery,
    MechanismKind,
    MechanismSpec,
    TwoRuleMechanism,
    constant_guarantee,
    dictator_guarantee,
    own_best_rule,
    two_rule_lottery_probability_one,
    two_rule_vote_probability_one,
    two_rule_vote_share,
)
from truthsieve.core.rules import RuleClass
from truthsieve.core.statistics import FloatArray, IntArray, SourceLabels
from truthsieve.exceptions import MechanismError

__all__ = [
    "ConsensusFit",
    "ConsensusMechanism",
    "DICTATORS",
    "DictatorLottery",
    "LotteryEntry",
    "MECHANISMS",
    "MECHANISM_REGISTRY",
    "MechanismKind",
    "MechanismResult",
    "MechanismSpec",
    "TwoRuleMechanism",
    "check_applies",
    "constant_guarantee",
    "dictator_guarantee",
    "dictator_probabilities",
    "dictator_scores",
    "fit_consensus",
    "fit_from_totals",
    "mechanism_spec",
    "own_best_rule",
    "own_best_rules",
    "registry_guarantee",
    "risk_ratio",
    "run_from_statistics",
    "run_mechanism",
    "two_rule_lottery_probability_one",
    "two_rule_vote_probability_one",
    "two_rule_vote_share",
]


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
    """The ERM over the global risk of the whole night's matrix."""
    return fit_from_totals(matrix.global_costs(), rule_class)


def fit_from_totals(totals: FloatArray, rule_class: RuleClass) -> ConsensusFit:
    """The ERM from the night's ``(m, K)`` summed costs alone (no label matrix needed)."""
    best, risk = rule_class.fit_with_risk(totals)
    return ConsensusFit(rule=best, risk=risk)


def own_best_rules(matrix: LabelMatrix, rule_class: RuleClass) -> IntArray:
    """Each source's ERM on its own labels alone (its dictator rule)."""
    return np.array([own_best_rule(s, rule_class) for s in matrix.sources], dtype=np.int64)


def mechanism_spec(name: str) -> MechanismSpec:
    """The registry entry of mechanism ``name``.

    :raises MechanismError: unknown name (the message lists the registered ones).
    """
    return MECHANISM_REGISTRY.require(name, MechanismError)


def _dictator(name: str) -> DictatorLottery:
    spec = mechanism_spec(name)
    if not isinstance(spec, DictatorLottery):
        raise MechanismError(f"{name!r} is not a dictator mechanism")
    return spec


def dictator_scores(name: str, present: FloatArray, registry_total: float | None = None) -> FloatArray:
    """The fixed score ``a_j`` of each present source (see the module docstring).

    :param present: registry weights (not normalised) of the sources present.
    :param registry_total: sum of the registry weights of *every* registered source;
        None means the sources present are the whole registry.
    """
    present = np.asarray(present, dtype=np.float64)
    return _dictator(name).scores(present, float(present.sum()) if registry_total is None else float(registry_total))


def dictator_probabilities(name: str, weights: FloatArray, registry_total: float | None = None) -> FloatArray:
    """``p_j = a_j / sum_k a_k`` over the sources present (weights need not be normalised)."""
    return _dictator(name).probabilities(np.asarray(weights, dtype=np.float64), registry_total)


def registry_guarantee(name: str, registry_weights: FloatArray) -> float:
    """Worst-case ratio of mechanism ``name`` when every registered source takes part.

    Depends on the configuration alone, so no source's labels or absence can move it.
    """
    return mechanism_spec(name).registry_guarantee(np.asarray(registry_weights, dtype=np.float64))


def check_applies(name: str, rule_class: RuleClass) -> MechanismSpec:
    """The entry of ``name``; refuses an unknown mechanism, or a class of a kind or a number
    of rules the entry does not accept (two-rule mechanisms: exactly the two constant rules).

    :raises MechanismError: with the reason in one line.
    """
    spec = mechanism_spec(name)
    reason = spec.refusal(rule_class.kind, rule_class.size)
    if reason is not None:
        raise MechanismError(reason)
    return spec


def run_mechanism(
    name: str,
    matrix: LabelMatrix,
    rule_class: RuleClass,
    consensus: ConsensusFit | None = None,
    registry_weights: Mapping[str, float] | None = None,
    own_rules: Mapping[str, int] | None = None,
) -> MechanismResult:
    """Run mechanism ``name`` on the whole night's matrix (see :func:`run_from_statistics`)."""
    return run_from_statistics(name, matrix.global_costs(), matrix.sources, rule_class, consensus, registry_weights, own_rules)


def run_from_statistics(
    name: str,
    totals: FloatArray,
    sources: Sequence[SourceLabels],
    rule_class: RuleClass,
    consensus: ConsensusFit | None = None,
    registry_weights: Mapping[str, float] | None = None,
    own_rules: Mapping[str, int] | None = None,
) -> MechanismResult:
    """Run mechanism ``name`` (its :data:`MECHANISM_REGISTRY` entry) and return its exact
    lottery, expected risk and ratio.

    :param totals: the night's ``(m, K)`` summed costs.
    :param sources: every present source's sparse labels, in source order.
    :param registry_weights: registry weight of every *registered* source (present or
        not); ``tuned_dictator`` fixes its odds from them. None: the sources present are
        the whole registry.
    :param own_rules: source id -> its own best rule where already known (the incentive
        analysis's ``own_best_rule``); a dictator lottery fits only the sources not in it.
    :raises MechanismError: unknown name, or a class the mechanism does not accept.
    """
    spec = check_applies(name, rule_class)
    consensus = consensus or fit_from_totals(totals, rule_class)
    rule_risks = rule_class.risks(totals)
    draws, guarantee, applies = spec.draws(sources, rule_class, consensus, registry_weights, own_rules)
    lottery = tuple(LotteryEntry(s, p, r, float(rule_risks[r])) for s, p, r in draws)
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
