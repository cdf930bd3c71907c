"""The rule-class and mechanism registries drive behaviour: an entry added in a test is built,
checked and run like the shipped ones, and an unknown name's error lists the registry."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from core_support import core_objects
from oracle import Instance
from registry_support import registered, squared_scores
from truthsieve.core.mechanisms import (
    DICTATORS,
    MECHANISM_REGISTRY,
    MECHANISMS,
    ConsensusMechanism,
    DictatorLottery,
    TwoRuleMechanism,
    check_applies,
    constant_guarantee,
    dictator_probabilities,
    dictator_scores,
    registry_guarantee,
    run_mechanism,
)
from truthsieve.core.rules import RULE_CLASS_KINDS, RULE_CLASSES, ConstantRules, RuleClassKind, build_rule_class
from truthsieve.exceptions import MechanismError, RuleClassError

SHIPPED_MECHANISMS = ("erm", "random_dictator", "weighted_dictator", "tuned_dictator", "two_rule_vote", "two_rule_lottery")


SQUARED = DictatorLottery(name="squared_dictator", description="test only: p ~ w^2", scores=squared_scores)


@pytest.fixture
def squared_dictator():
    with registered(MECHANISM_REGISTRY, SQUARED) as entry:
        yield entry


# a (weight 2) labels all three items 1, b (weight 1) labels them 0: shared inputs.
TWO_SOURCES = Instance(n_items=3, labels={"a": {0: 1, 1: 1, 2: 1}, "b": {0: 0, 1: 0, 2: 0}}, source_weights={"a": 2, "b": 1}, item_weights=(1, 1, 1))


def test_the_shipped_names_are_the_contract_order():
    # CONTRACT.md's "Mechanisms" and "Rule classes" tables, in their order.
    assert tuple(MECHANISMS) == SHIPPED_MECHANISMS and MECHANISMS == SHIPPED_MECHANISMS
    assert tuple(DICTATORS) == ("random_dictator", "weighted_dictator", "tuned_dictator")
    assert tuple(RULE_CLASS_KINDS) == ("constant", "threshold", "listed")


def test_a_registered_dictator_runs_with_its_own_scores(squared_dictator):
    assert "squared_dictator" in MECHANISMS and DICTATORS[-1] == "squared_dictator"
    result = run_mechanism("squared_dictator", *core_objects(TWO_SOURCES, "constant"))
    # By hand: scores 2^2 = 4 and 1^2 = 1, so p = (4/5, 1/5); a's own rule is all-1, b's all-0.
    # Normalised weights (2/3, 1/3): R(all-1) = 1/3 (b is wrong on all), R(all-0) = 2/3; r* = 1/3.
    # E[R] = 4/5 * 1/3 + 1/5 * 2/3 = 2/5; ratio (2/5) / (1/3) = 6/5.
    # Guarantee 1 + 2 max(4/5 * (1/3)/(2/3), 1/5 * (2/3)/(1/3)) = 1 + 2 * 2/5 = 9/5.
    assert [(e.source_id, e.rule) for e in result.lottery] == [("a", 1), ("b", 0)]
    assert [e.probability for e in result.lottery] == pytest.approx([4 / 5, 1 / 5], abs=1e-15)
    assert result.expected_risk == pytest.approx(2 / 5, abs=1e-15)
    assert result.ratio == pytest.approx(6 / 5, abs=1e-15)
    assert result.guarantee == pytest.approx(9 / 5, abs=1e-15) and result.guarantee_applies
    assert registry_guarantee("squared_dictator", np.array([2.0, 1.0])) == pytest.approx(9 / 5, abs=1e-15)
    assert dictator_scores("squared_dictator", np.array([2.0, 1.0])).tolist() == [4.0, 1.0]
    assert dictator_probabilities("squared_dictator", np.array([3.0, 1.0])) == pytest.approx([9 / 10, 1 / 10], abs=1e-15)


def test_the_unknown_mechanism_error_lists_the_registry(squared_dictator):
    with pytest.raises(MechanismError) as caught:
        run_mechanism("median_voter", *core_objects(TWO_SOURCES, "constant"))
    assert str(caught.value) == "unknown mechanism 'median_voter'; expected one of " + ", ".join([*SHIPPED_MECHANISMS, "squared_dictator"])


def test_an_unregistered_mechanism_is_unknown_again():
    with registered(MECHANISM_REGISTRY, SQUARED):
        pass
    assert "squared_dictator" not in MECHANISMS
    with pytest.raises(MechanismError, match="^unknown mechanism 'squared_dictator'; expected one of erm, .*, two_rule_lottery$"):
        run_mechanism("squared_dictator", *core_objects(TWO_SOURCES, "constant"))


def test_a_name_registered_twice_is_refused():
    with pytest.raises(ValueError, match="mechanism 'erm' is registered already"):
        MECHANISM_REGISTRY.register(ConsensusMechanism(name="erm", description="again", guarantee=constant_guarantee(1.0)))
    assert tuple(MECHANISMS) == SHIPPED_MECHANISMS


def test_the_entry_decides_which_rule_classes_and_how_many_rules_it_accepts():
    only_listed = DictatorLottery(name="listed_dictator", description="test", scores=squared_scores, rule_classes=("listed",))
    three_rules = DictatorLottery(name="three_rule_dictator", description="test", scores=squared_scores, rule_count=3)
    with registered(MECHANISM_REGISTRY, only_listed), registered(MECHANISM_REGISTRY, three_rules):
        constant = core_objects(TWO_SOURCES, "constant")
        with pytest.raises(MechanismError, match="^listed_dictator needs the listed rule class, not 'constant' with 2 rules$"):
            run_mechanism("listed_dictator", *constant)
        with pytest.raises(MechanismError, match="^three_rule_dictator needs the constant or threshold or listed rule class of exactly three rules"):
            check_applies("three_rule_dictator", constant[1])
        three = Instance(n_items=1, labels={"a": {0: 2}}, source_weights={"a": 1}, item_weights=(1,), n_classes=3)
        assert check_applies("three_rule_dictator", core_objects(three, "constant")[1]) is three_rules


def test_a_registered_two_rule_mechanism_uses_its_probability_function():
    # P(all-1) = t^2; here t = 2/3 (a votes 1), so the lottery is (5/9 on all-0, 4/9 on all-1).
    squared_vote = TwoRuleMechanism(name="two_rule_squared", description="test", probability_one=lambda t: t * t, guarantee=constant_guarantee(7.0))
    with registered(MECHANISM_REGISTRY, squared_vote):
        result = run_mechanism("two_rule_squared", *core_objects(TWO_SOURCES, "constant"))
        assert [(e.rule, e.probability) for e in result.lottery] == [(0, pytest.approx(5 / 9)), (1, pytest.approx(4 / 9))]
        assert result.guarantee == 7.0 and registry_guarantee("two_rule_squared", np.array([1.0, 5.0])) == 7.0
        assert "two_rule_squared" not in DICTATORS
        with pytest.raises(MechanismError, match="not a dictator mechanism"):
            dictator_scores("two_rule_squared", np.array([1.0]))


def _items():
    return pd.DataFrame({"item_id": ["b", "a"], "f": [2.0, 1.0], "g": [5.0, 6.0], "rule__x": [1, 0], "rule__y": [0, 1]})


def test_a_registered_rule_class_gets_exactly_the_columns_its_entry_asks_for():
    seen = []

    def build(columns, n_items, n_classes):
        seen.append((list(columns.columns), columns.index.tolist(), n_items, n_classes))
        return ConstantRules(n_items, n_classes)

    entry = RuleClassKind("recording", "test", build, needs_features=True, uses_rule_columns=True)
    with registered(RULE_CLASSES, entry):
        assert "recording" in RULE_CLASS_KINDS
        built = build_rule_class("recording", _items(), np.array(["a", "b"]), ["g", "f"], 3)
        assert isinstance(built, ConstantRules) and built.size == 3
        # features in the given (tie-break) order, then the rule__ columns; rows in item_ids order
        assert seen == [(["g", "f", "rule__x", "rule__y"], ["a", "b"], 2, 3)]
        with pytest.raises(RuleClassError, match="^recording class needs at least one feature$"):
            build_rule_class("recording", _items(), np.array(["a", "b"]), [])
        with pytest.raises(RuleClassError, match="^recording features not in the items table: h$"):
            build_rule_class("recording", _items(), np.array(["a", "b"]), ["f", "h"])
    plain = RuleClassKind("plain", "test", build)
    with registered(RULE_CLASSES, plain):
        build_rule_class("plain", _items(), np.array(["b"]), ["f"])
        assert seen[-1] == ([], ["b"], 1, 2)  # neither features nor rule columns asked for


def test_the_unknown_rule_class_error_lists_the_registry():
    entry = RuleClassKind("extra", "test", lambda columns, n_items, k: ConstantRules(n_items, k))
    with registered(RULE_CLASSES, entry), pytest.raises(RuleClassError) as caught:
        build_rule_class("polynomial", _items(), np.array(["a"]))
    assert str(caught.value) == "unknown rule class 'polynomial'; expected one of constant, threshold, listed, extra"
