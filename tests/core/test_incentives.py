"""Gain from misreporting under the consensus fit, against exhaustive search over every report."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from core_support import FEATURES, core_objects
from oracle import exhaustive_erm_gain, rng_instance
from strategies import instances
from test_mechanisms import manipulable_instance
from truthsieve.core import fit_consensus, incentives, source_incentive


def analyse(instance, kind, budget=None):
    matrix, rule_class = core_objects(instance, kind)
    consensus = fit_consensus(matrix, rule_class)
    return matrix, rule_class, consensus, incentives(matrix, rule_class, consensus, budget=budget)


@pytest.mark.parametrize("kind", ["constant", "threshold", "listed"])
@given(data=st.data())
def test_exact_gain_equals_exhaustive_search(kind, data):
    instance = data.draw(instances(kind=kind, max_sources=3, max_items=5))
    _, _, _, results = analyse(instance, kind, budget=None)
    for result in results:
        assert result.gain_exact
        expected = exhaustive_erm_gain(instance, kind, FEATURES, result.source_id)
        assert result.gain_lower == pytest.approx(float(expected), abs=1e-12)
        assert result.gain_upper == pytest.approx(float(expected), abs=1e-12)


@pytest.mark.parametrize("seed", range(40))
def test_brackets_contain_the_exhaustive_gain_under_a_tight_budget(seed):
    rng = np.random.default_rng(seed)
    instance = rng_instance(rng, n_sources=int(rng.integers(2, 4)), n_items=6, shared=bool(seed % 2), kind="threshold")
    _, _, _, tight = analyse(instance, "threshold", budget=1)
    for result in tight:
        expected = float(exhaustive_erm_gain(instance, "threshold", FEATURES, result.source_id))
        assert result.gain_lower - 1e-12 <= expected <= result.gain_upper + 1e-12
        if result.gain_exact:
            assert result.gain_lower == pytest.approx(expected, abs=1e-12)
        else:
            assert result.gain_upper > result.gain_lower


@pytest.mark.parametrize("kind", ["constant", "threshold", "listed"])
@given(data=st.data())
def test_cheapest_lie_bracket_is_consistent_with_reporting_the_target(kind, data):
    instance = data.draw(instances(kind=kind, max_sources=3, max_items=5))
    matrix, rule_class, consensus, results = analyse(instance, kind)
    for i, result in enumerate(results):
        assert 0.0 <= result.lie_weight_lower <= result.lie_weight_upper + 1e-12
        # Reporting the target's own labels reaches it, so the cheapest lie never changes
        # more than the labels on which the source disagrees with the target:
        # R_i(target) * sum of its item weights (by the reachability argument in the module).
        assert result.lie_weight_upper <= result.target_risk * matrix.coverage_weight[i] + 1e-9
        assert result.damage >= 0.0
        if result.gain_lower > 0:
            assert result.lie_weight_upper > 0


def test_hand_computed_gain_on_the_manipulable_instance():
    # See manipulable_instance: src-0's risk falls from 3/5 to 2/5 by lying, a gain of 1/5.
    # Each of its 0-labels flipped to 1 moves R(all-0) - R(all-1) by 2/15, starting at -1/5:
    # one flip leaves -1/15, two give +1/15, so the cheapest lie flips 2 lots; the margin
    # bound is (1/5) * 5 / (2/3) = 3/2. The lie raises the global risk from 2/5 to 3/5.
    _, rule_class, _, results = analyse(manipulable_instance(), "constant")
    first = results[0]
    assert first.source_id == "src-0"
    assert first.gain_exact
    assert first.gain_lower == pytest.approx(1 / 5)
    assert rule_class.describe(first.target_rule) == {"kind": "constant", "label": 1}
    assert first.lie_weight_lower == pytest.approx(3 / 2)
    assert first.lie_weight_upper == pytest.approx(2)
    assert first.damage == pytest.approx(1 / 5)
    # src-1 already gets its preferred rule: nothing to gain.
    assert results[1].gain_upper == 0.0


def test_sources_own_erm_is_reported():
    matrix, rule_class, consensus, results = analyse(manipulable_instance(), "constant")
    assert [r.own_best_risk for r in results] == pytest.approx([2 / 5, 0.0, 2 / 5])
    assert [r.disagreement for r in results] == pytest.approx([3 / 5, 0.0, 3 / 5])


def test_budget_zero_reports_a_bracket_not_an_exact_value():
    # Seed 1 gives a shared-input instance where src-0 gains 1/8 by misreporting (the
    # exhaustive oracle below), so finding its target needs at least one reachability check.
    instance = rng_instance(np.random.default_rng(1), n_sources=3, n_items=6, shared=True, kind="threshold")
    matrix, rule_class = core_objects(instance, "threshold")
    consensus = fit_consensus(matrix, rule_class)
    index = matrix.source_ids.index("src-0")
    exact = float(exhaustive_erm_gain(instance, "threshold", FEATURES, "src-0"))
    assert exact > 0
    bracket = source_incentive(matrix, rule_class, consensus, index, budget=0)
    assert bracket.gain_exact is False
    assert bracket.gain_lower - 1e-12 <= exact <= bracket.gain_upper + 1e-12
    assert bracket.gain_lower < bracket.gain_upper
    unlimited = source_incentive(matrix, rule_class, consensus, index, budget=None)
    assert unlimited.gain_exact is True
    assert unlimited.gain_lower == pytest.approx(exact, abs=1e-12) == unlimited.gain_upper


@pytest.mark.parametrize("kind", ["constant", "threshold", "listed"])
@pytest.mark.parametrize("seed", range(25))
def test_pull_equals_brute_force_with_and_without_the_source(kind, seed):
    from oracle import brute_force_pull, enumerate_rules, erm, others_risk

    rng = np.random.default_rng(1000 + seed)
    instance = rng_instance(rng, int(rng.integers(2, 5)), int(rng.integers(2, 7)), bool(seed % 3), kind)
    _, _, _, results = analyse(instance, kind)
    features = FEATURES if kind == "threshold" else []
    for result in results:
        expected = brute_force_pull(instance, kind, features, result.source_id)
        assert result.pull == pytest.approx(float(expected), abs=1e-12)
        # and the others' ERM is their minimum: pull = G(e) - min_c G(c)
        floor = min(others_risk(instance, result.source_id, labelling) for _, labelling in enumerate_rules(instance, kind, features))
        at_consensus = others_risk(instance, result.source_id, erm(instance, kind, features)[1])
        assert result.pull == pytest.approx(float(at_consensus - floor), abs=1e-12)
        assert result.pull <= float(instance.source_weights[result.source_id]) / sum(instance.source_weights.values()) + 1e-12


def test_pull_of_a_source_that_moved_the_fit_by_hand():
    """Three lots, constant class; A (weight 2) rejects all, B (weight 3) accepts all.

    ERM: R(all-0) = 3/5, R(all-1) = 2/5 -> all-1, B's rule. Without B the others' ERM is
    all-0 (A's). pull_B = G_A(all-1) - G_A(all-0) = 2/5 * 1 - 0 = 0.4; pull_A: without A
    the fit stays all-1, so 0. Gain is 0 for both: B already got its rule, A cannot win.
    """
    from oracle import Instance

    instance = Instance(
        n_items=3,
        labels={"A": {0: 0, 1: 0, 2: 0}, "B": {0: 1, 1: 1, 2: 1}},
        source_weights={"A": 2, "B": 3},
        item_weights=(1, 1, 1),
    )
    _, _, _, (a, b) = analyse(instance, "constant")
    assert (a.pull, b.pull) == (pytest.approx(0.0), pytest.approx(0.4))
    assert b.gain_upper == 0.0
