"""The fast incentive analysis equals the full-pass oracle in ``reference_incentives``.

Seeded random instances, larger than exhaustive search allows, with partial coverage,
uneven item and source weights, rule-shaped liars and tied feature values.
"""

from __future__ import annotations


import numpy as np
import pandas as pd
import pytest

from reference_incentives import assert_every_source_matches
from truthsieve.core import build_label_matrix, build_rule_class, fit_consensus, source_incentive

FEATURES = ["f0", "f1", "f2"]


def random_batch(seed: int, kind: str):
    rng = np.random.default_rng(seed)
    n_items = int(rng.integers(20, 200))
    n_sources = int(rng.integers(2, 7))
    features = {f: np.round(rng.normal(0, 1, n_items), int(rng.integers(0, 3))) for f in FEATURES}
    items = pd.DataFrame({"item_id": [f"i{k:04d}" for k in rng.permutation(n_items)], **features})
    if seed % 3:
        items["item_weight"] = rng.choice([0.5, 1.0, 2.0, 3.0], n_items)
    for r in range(int(rng.integers(1, 6))):
        items[f"rule__r{r}"] = features["f0"] > rng.normal(0, 1)
    truth = features["f0"] + 0.5 * features["f1"] > 0
    rows = []
    for s in range(n_sources):
        coverage = 1.0 if seed % 2 else rng.uniform(0.2, 1.0)
        covered = np.flatnonzero(rng.random(n_items) < coverage)
        if len(covered) == 0:
            covered = np.array([0])
        if s == 0:
            labels = features[FEATURES[seed % 3]] > rng.normal(0, 0.5)  # a rule-shaped liar
        else:
            labels = truth ^ (rng.random(n_items) < rng.uniform(0.0, 0.4))
        rows.append(pd.DataFrame({"item_id": items["item_id"].to_numpy()[covered], "source_id": f"s{s}", "label": labels[covered].astype(int)}))
    labels = pd.concat(rows, ignore_index=True)
    weights = {f"s{s}": float(rng.choice([1.0, 2.0, 0.5, 3.0])) for s in range(n_sources)}
    matrix = build_label_matrix(labels, items, weights)
    rule_class = build_rule_class(kind, items, matrix.item_ids, FEATURES if kind == "threshold" else ())
    return matrix, rule_class


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
