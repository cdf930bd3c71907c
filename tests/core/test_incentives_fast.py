"""The fast incentive analysis equals the full-pass oracle in ``reference_incentives``.

Seeded random instances, larger than exhaustive search allows, with partial coverage,
uneven item and source weights, rule-shaped liars and tied feature values.
"""

from __future__ import annotations


import numpy as np
import pandas as pd
import pytest

from reference_incentives import assert_every_source_matches
from random_nights import FEATURES, random_night
from truthsieve.core import build_label_matrix, build_rule_class, fit_consensus, source_incentive

def random_batch(seed: int, kind: str):
    """A two-class night (:func:`random_nights.random_night`)."""
    return random_night(seed, 2, kind)


@pytest.mark.parametrize("budget", [None, 3])
@pytest.mark.parametrize("kind", ["constant", "threshold", "listed"])
@pytest.mark.parametrize("seed", range(25))
def test_fast_incentives_equal_the_full_pass_oracle(seed, kind, budget):
    matrix, rule_class = random_batch(seed, kind)
    assert_every_source_matches(matrix, rule_class, fit_consensus(matrix, rule_class), budget)


@pytest.mark.parametrize("kind", ["constant", "threshold", "listed"])
@pytest.mark.parametrize("seed", range(10))
def test_cut_bin_risks_equal_dense_predictions_on_all_and_on_a_subset(seed, kind):
    from reference_incentives import predictions

    matrix, rule_class = random_batch(seed, kind)
    rng = np.random.default_rng(seed)
    costs = rng.normal(size=(matrix.n_items, rule_class.n_classes))
    table = predictions(rule_class)

    def dense(rows):  # sum_j costs[j, r(x_j)], unclipped, straight from the predictions
        return np.take_along_axis(costs[rows], table[rows], axis=1).sum(axis=0)

    assert rule_class.linear_risks(costs) == pytest.approx(dense(slice(None)), abs=1e-9)
    items = np.flatnonzero(rng.random(matrix.n_items) < 0.3)
    sparse = rule_class.linear_risks(costs[items], items=items)
    assert sparse == pytest.approx(dense(items), abs=1e-9)
    for rule in rng.integers(0, rule_class.size, 5):
        assert (rule_class.predict(int(rule), items) == table[items, rule]).all()


@pytest.mark.parametrize("seed", range(6))
def test_a_source_analysed_alone_equals_the_batch_loop_bit_for_bit(seed):
    # Airflow maps one task per source (no shared context); the CLI shares it.
    from truthsieve.core.incentives import incentives

    matrix, rule_class = random_batch(seed, "threshold")
    consensus = fit_consensus(matrix, rule_class)
    alone = [source_incentive(matrix, rule_class, consensus, i, 64) for i in range(matrix.n_sources)]
    assert incentives(matrix, rule_class, consensus, 64) == alone


@pytest.mark.parametrize("seed", range(6))
def test_global_costs_without_a_source_equal_the_sum_over_the_others(seed):
    from reference_incentives import coverage, others_costs

    matrix, _ = random_batch(seed, "constant")
    assert matrix.coverage_weight == pytest.approx(coverage(matrix), abs=1e-12)
    for i in range(matrix.n_sources):
        assert matrix.global_costs(exclude=i) == pytest.approx(others_costs(matrix, i), abs=1e-12)
