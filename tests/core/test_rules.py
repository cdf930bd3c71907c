"""Exact ERM of every rule class against brute-force enumeration in rational arithmetic."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from core_support import FEATURES, core_objects
from oracle import enumerate_rules, erm, global_risk, own_erm, private_risk
from strategies import instances
from truthsieve.core import build_rule_class, fit_consensus, own_best_rules
from truthsieve.exceptions import RuleClassError


@pytest.mark.parametrize("kind", ["constant", "threshold", "listed"])
@given(data=st.data())
def test_consensus_fit_equals_brute_force(kind, data):
    instance = data.draw(instances(kind=kind))
    matrix, rule_class = core_objects(instance, kind)
    fit = fit_consensus(matrix, rule_class)
    form, labelling, risk = erm(instance, kind, FEATURES)
    assert rule_class.describe(fit.rule) == form
    assert fit.risk == pytest.approx(float(risk), abs=1e-12)
    assert tuple(rule_class.predict(fit.rule).astype(int)) == labelling


@pytest.mark.parametrize("kind", ["constant", "threshold", "listed"])
@given(data=st.data())
def test_every_rule_risk_matches_rational_arithmetic(kind, data):
    instance = data.draw(instances(kind=kind, max_sources=3, max_items=5))
    matrix, rule_class = core_objects(instance, kind)
    expected_global = [global_risk(instance, lab) for _, lab in enumerate_rules(instance, kind, FEATURES)]
    assert rule_class.size == len(expected_global)
    np.testing.assert_allclose(rule_class.risks(matrix.global_costs()), [float(r) for r in expected_global], atol=1e-12)
    for i, source in enumerate(matrix.source_ids):
        expected = [private_risk(instance, source, lab) for _, lab in enumerate_rules(instance, kind, FEATURES)]
        np.testing.assert_allclose(rule_class.risks(matrix.source_costs(i)), [float(r) for r in expected], atol=1e-12)


@pytest.mark.parametrize("kind", ["constant", "threshold", "listed"])
@given(data=st.data())
def test_own_best_rule_is_the_sources_own_erm(kind, data):
    instance = data.draw(instances(kind=kind))
    matrix, rule_class = core_objects(instance, kind)
    for source, rule in zip(matrix.source_ids, own_best_rules(matrix, rule_class)):
        assert rule_class.describe(int(rule)) == own_erm(instance, kind, FEATURES, source)[0]


def test_constant_tie_resolves_to_reject():
    # Two equally weighted sources disagree on every item: both constants have risk 1/2.
    labels = pd.DataFrame({"item_id": ["a", "a"], "source_id": ["x", "y"], "label": [0, 1]})
    items = pd.DataFrame({"item_id": ["a"]})
    from truthsieve.core import build_label_matrix

    matrix = build_label_matrix(labels, items, {"x": 1.0, "y": 1.0})
    rule_class = build_rule_class("constant", items, matrix.item_ids)
    assert rule_class.describe(fit_consensus(matrix, rule_class).rule) == {"kind": "constant", "label": 0}
    assert fit_consensus(matrix, rule_class).risk == Fraction(1, 2)


def test_threshold_cuts_are_midpoints_between_distinct_values():
    items = pd.DataFrame({"item_id": list("abcd"), "moisture_pct": [13.0, 15.0, 13.0, 16.5]})
    rule_class = build_rule_class("threshold", items, np.array(list("abcd")), ["moisture_pct"])
    cuts = sorted({rule_class.describe(k)["cut"] for k in range(2, rule_class.size)})
    assert cuts == [14.0, 15.75]


@pytest.mark.parametrize(
    ("kind", "columns", "features", "message"),
    [
        ("threshold", {"moisture_pct": [14.0, 14.0]}, ["moisture_pct"], "no usable feature"),
        ("threshold", {"moisture_pct": [13.0, 14.0]}, ["protein_pct"], "not in the items table"),
        ("threshold", {"moisture_pct": [13.0, 14.0]}, [], "at least one feature"),
        ("listed", {"moisture_pct": [13.0, 14.0]}, [], "no rules"),
        ("polynomial", {}, [], "unknown rule class"),
    ],
)
def test_impossible_rule_classes_raise(kind, columns, features, message):
    items = pd.DataFrame({"item_id": ["a", "b"], **columns})
    with pytest.raises(RuleClassError, match=message):
        build_rule_class(kind, items, np.array(["a", "b"]), features)


@pytest.mark.parametrize("low", [1.0 + 2.0**-52, 1.5e308, -1.7e308])
def test_every_cut_separates_its_two_neighbours_even_between_adjacent_floats(low):
    # Adjacent floats: the naive midpoint (low + high) / 2 rounds to even, which for these
    # lows is high itself (or overflows to inf near the top of the range), so high would
    # fall on the wrong side of its own cut. Common practice for floating-point midpoints.
    from truthsieve.core.rules import ThresholdRules

    high = float(np.nextafter(low, np.inf))
    rules = ThresholdRules(pd.DataFrame({"x": [low, high]}))
    cut = float(rules.features[0].cuts[0])
    assert np.isfinite(cut) and low <= cut < high
    above = rules.predict(3)  # the first feature's only cut, above=1
    assert above.tolist() == [False, True]
