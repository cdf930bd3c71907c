"""Per-source shortcuts of the analysis and decide stages equal the straight computation.

Seeded random nights (:mod:`random_nights`: K classes, partial coverage, uneven weights,
tied feature values, a rule-shaped liar), every rule-class kind.
"""

from __future__ import annotations

import pytest

from random_nights import random_night
from truthsieve.core import fit_consensus, own_best_rule, run_mechanism
from truthsieve.core.incentives import incentives
from truthsieve.core.mechanisms import DICTATORS

KINDS = ["constant", "threshold", "listed"]


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("n_classes", [2, 3])
@pytest.mark.parametrize("seed", range(12))
def test_the_incentive_analysis_finds_each_sources_own_best_rule(seed, n_classes, kind):
    matrix, rule_class = random_night(seed, n_classes, kind)
    found = incentives(matrix, rule_class, fit_consensus(matrix, rule_class), 8)
    assert [i.own_best_rule for i in found] == [own_best_rule(s, rule_class) for s in matrix.sources]


@pytest.mark.parametrize("mechanism", sorted(DICTATORS))
@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("seed", range(8))
def test_a_dictator_lottery_from_known_own_rules_equals_fitting_each_source(seed, kind, mechanism):
    matrix, rule_class = random_night(seed, 2 + seed % 2, kind)
    consensus = fit_consensus(matrix, rule_class)
    known = {i.source_id: i.own_best_rule for i in incentives(matrix, rule_class, consensus, 8)}
    known.pop(matrix.source_ids[0])  # a source not in the mapping is fitted
    assert run_mechanism(mechanism, matrix, rule_class, consensus, None, known) == run_mechanism(mechanism, matrix, rule_class, consensus)
