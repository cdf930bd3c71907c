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


def _feature_by_feature(rule_class):
    """The same class scoring feature by feature (the stacked slots dropped): the oracle."""
    import copy

    slow = copy.copy(rule_class)
    slow._slots = None
    return slow


@pytest.mark.parametrize("n_classes", [2, 3, 4])
@pytest.mark.parametrize("seed", range(15))
def test_stacked_cut_slots_give_the_floats_of_the_per_feature_loop(seed, n_classes):
    import numpy as np

    matrix, rule_class = random_night(seed, n_classes, "threshold")
    assert rule_class._slots is not None
    slow = _feature_by_feature(rule_class)
    rng = np.random.default_rng(seed)
    costs = rng.normal(size=(matrix.n_items, n_classes)) * rng.choice([1e-3, 1.0, 1e3], size=(matrix.n_items, 1))
    subsets = [None, np.flatnonzero(rng.random(matrix.n_items) < 0.3), rng.permutation(matrix.n_items)[:5], np.zeros(0, dtype=np.int64)]
    for items in subsets:
        rows = costs if items is None else costs[items]
        fast_risks, slow_risks = rule_class.linear_risks(rows, items), slow.linear_risks(rows, items)
        assert fast_risks.tobytes() == slow_risks.tobytes()
        if len(rows):
            assert rule_class.fit_with_risk(rows, items) == slow.fit_with_risk(rows, items)
    for source in matrix.sources:
        costs_i = source.sparse_costs(n_classes)
        assert rule_class.linear_risks(costs_i, source.items).tobytes() == slow.linear_risks(costs_i, source.items).tobytes()
        assert rule_class.fit(costs_i, source.items) == slow.fit(costs_i, source.items)


@pytest.mark.parametrize("seed", range(6))
def test_incentives_with_stacked_slots_equal_those_scored_feature_by_feature(seed):
    matrix, rule_class = random_night(seed, 2 + seed % 3, "threshold")
    consensus = fit_consensus(matrix, rule_class)
    assert incentives(matrix, rule_class, consensus, 8) == incentives(matrix, _feature_by_feature(rule_class), consensus, 8)


@pytest.mark.parametrize("seed", range(4))
def test_the_work_files_incentive_record_is_asdict(seed):
    import json
    from dataclasses import asdict

    from truthsieve.core.incentives import SourceIncentive
    from truthsieve.pipeline.work_files import incentive_record

    matrix, rule_class = random_night(seed, 2 + seed % 2, "threshold")
    for result in incentives(matrix, rule_class, fit_consensus(matrix, rule_class), 8):
        record = incentive_record(result)
        assert record == asdict(result) and list(record) == list(asdict(result))
        assert json.dumps(record, sort_keys=True) == json.dumps(asdict(result), sort_keys=True)
        assert SourceIncentive(**json.loads(json.dumps(record))) == result


@pytest.mark.parametrize("n_classes", [2, 3, 4])
@pytest.mark.parametrize("seed", range(10))
def test_risks_at_chosen_rules_from_stacked_slots_are_the_full_passes_floats(seed, n_classes):
    import numpy as np

    matrix, rule_class = random_night(seed, n_classes, "threshold")
    slow = _feature_by_feature(rule_class)
    rng = np.random.default_rng(seed)
    costs = rng.normal(size=(matrix.n_items, n_classes)) * rng.choice([1e-3, 1.0, 1e3], size=(matrix.n_items, 1))
    for items in (None, np.flatnonzero(rng.random(matrix.n_items) < 0.4), np.zeros(0, dtype=np.int64)):
        rows = costs if items is None else costs[items]
        everything = slow.linear_risks(rows, items)
        for rules in (rng.integers(0, rule_class.size, 40), np.arange(n_classes), np.zeros(0, dtype=np.int64)):
            fast = rule_class.linear_risks_at(rows, items, rules)
            assert fast.tobytes() == slow.linear_risks_at(rows, items, rules).tobytes() == everything[rules].tobytes()
