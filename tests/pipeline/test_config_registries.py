"""The configuration validates ``mechanism`` and ``rule_class`` against the core's registries:
an entry registered in a test is accepted or refused by what the entry says."""

from __future__ import annotations

import pytest
import yaml

from registry_support import registered, squared_scores
from truthsieve.core.mechanisms import MECHANISM_REGISTRY, ConsensusMechanism, DictatorLottery, constant_guarantee
from truthsieve.core.rules import RULE_CLASSES, ConstantRules, RuleClassKind
from truthsieve.exceptions import ConfigError
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.routing import registry_guarantee

SHIPPED = "erm, random_dictator, weighted_dictator, tuned_dictator, two_rule_vote, two_rule_lottery"


@pytest.fixture
def squared_dictator():
    with registered(MECHANISM_REGISTRY, DictatorLottery(name="squared_dictator", description="test: p ~ w^2", scores=squared_scores)) as entry:
        yield entry


def _load(tmp_path, **overrides):
    config = {"rule_class": {"kind": "constant"}, "mechanism": "random_dictator", "sources": [{"source_id": "lab", "weight": 2.0}, {"source_id": "north", "weight": 1.0}]}
    path = tmp_path / "c.yaml"
    path.write_text(yaml.safe_dump({**config, **overrides}))
    return load_config(path)


def _error(tmp_path, **overrides) -> str:
    with pytest.raises(ConfigError) as caught:
        _load(tmp_path, **overrides)
    assert "\n" not in str(caught.value)
    return str(caught.value)


def test_a_registered_mechanism_is_accepted_and_its_guarantee_read(tmp_path, squared_dictator):
    config = _load(tmp_path, mechanism="squared_dictator")
    assert config.mechanism == "squared_dictator"
    # Registry weights (2, 1): p = (4/5, 1/5), w = (2/3, 1/3); 1 + 2 * max(2/5, 2/5) = 9/5 by hand.
    assert registry_guarantee(config.mechanism, [s.weight for s in config.sources]) == pytest.approx(9 / 5, abs=1e-15)


def test_an_unknown_mechanism_lists_the_registry(tmp_path, squared_dictator):
    message = _error(tmp_path, mechanism="median_voter")
    assert f"mechanism: Value error, unknown mechanism 'median_voter'; expected one of {SHIPPED}, squared_dictator" in message


def test_a_mechanism_once_unregistered_is_refused(tmp_path):
    with registered(MECHANISM_REGISTRY, DictatorLottery(name="squared_dictator", description="test", scores=squared_scores)):
        assert _load(tmp_path, mechanism="squared_dictator").mechanism == "squared_dictator"
    assert f"unknown mechanism 'squared_dictator'; expected one of {SHIPPED}" in _error(tmp_path, mechanism="squared_dictator")


def test_a_mechanism_marked_not_strategy_proof_needs_guarded_mode(tmp_path):
    with registered(MECHANISM_REGISTRY, ConsensusMechanism(name="erm_again", description="test", guarantee=constant_guarantee(1.0), strategy_proof=False)):
        message = _error(tmp_path, mechanism="erm_again")
        assert "mechanism 'erm_again' is not strategy-proof and cannot be used with routing.mode 'strategy_proof'" in message
        assert "choose one of random_dictator, weighted_dictator, tuned_dictator, two_rule_vote, two_rule_lottery, or set routing.mode: guarded" in message
        assert _load(tmp_path, mechanism="erm_again", routing={"mode": "guarded"}).mechanism == "erm_again"
    assert "mechanism 'erm' is not strategy-proof" in _error(tmp_path, mechanism="erm")


def test_the_entry_says_which_rule_classes_a_mechanism_accepts(tmp_path):
    entry = DictatorLottery(name="listed_dictator", description="test", scores=squared_scores, rule_classes=("listed", "constant"))
    with registered(MECHANISM_REGISTRY, entry):
        message = _error(tmp_path, mechanism="listed_dictator", rule_class={"kind": "threshold", "features": ["f"]})
        assert "mechanism 'listed_dictator' needs rule_class.kind 'listed' or 'constant'" in message
        assert _load(tmp_path, mechanism="listed_dictator", rule_class={"kind": "listed"}).mechanism == "listed_dictator"
    assert "mechanism 'two_rule_vote' needs rule_class.kind 'constant'" in _error(
        tmp_path, mechanism="two_rule_vote", rule_class={"kind": "threshold", "features": ["f"]}
    )


def test_the_entry_says_how_many_rules_a_mechanism_accepts(tmp_path):
    entry = DictatorLottery(name="three_rule_dictator", description="test", scores=squared_scores, rule_count=3)
    with registered(MECHANISM_REGISTRY, entry):
        message = _error(tmp_path, mechanism="three_rule_dictator")  # default: two classes, so two constant rules
        assert "mechanism 'three_rule_dictator' chooses between exactly three rules, but classes has 2 (so the constant class has 2 rules)" in message
        assert _load(tmp_path, mechanism="three_rule_dictator", classes=["x", "y", "z"]).class_alphabet.count == 3
        # a threshold class's size depends on the items, so only the core can refuse it
        assert _load(tmp_path, mechanism="three_rule_dictator", rule_class={"kind": "threshold", "features": ["f"]}).mechanism == "three_rule_dictator"


def test_a_registered_rule_class_is_accepted_with_the_features_its_entry_needs(tmp_path):
    entry = RuleClassKind("cut_like", "test", lambda columns, n_items, k: ConstantRules(n_items, k), needs_features=True)
    with registered(RULE_CLASSES, entry):
        assert _load(tmp_path, rule_class={"kind": "cut_like", "features": ["f"]}).rule_class.kind == "cut_like"
        assert "rule_class.kind 'cut_like' needs a non-empty 'features' list" in _error(tmp_path, rule_class={"kind": "cut_like"})
        message = _error(tmp_path, rule_class={"kind": "polynomial"})
        assert "rule_class.kind: Value error, unknown rule class 'polynomial'; expected one of constant, threshold, listed, cut_like" in message
    assert "unknown rule class 'cut_like'; expected one of constant, threshold, listed" in _error(tmp_path, rule_class={"kind": "cut_like", "features": ["f"]})
    # a kind without needs_features takes none
    assert _load(tmp_path, rule_class={"kind": "listed"}).rule_class.features == []
