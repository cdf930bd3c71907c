"""K classes (K = 3, 4): exact ERM, strategy-proof dictators, the guarantee, incentives.

Every known answer comes from the rational brute force in ``tests/oracle.py`` (every rule
enumerated as an explicit labelling, every report enumerated over K labels), from the
full-pass oracle in ``reference_incentives.py``, or from a hand calculation shown beside it.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from core_support import FEATURES, core_objects
from oracle import (
    Instance,
    brute_force_pull,
    dictator_guarantee,
    dictator_lottery,
    enumerate_rules,
    erm,
    exhaustive_erm_gain,
    global_risk,
    own_erm,
    private_risk,
    rng_instance,
)
from reference_incentives import assert_every_source_matches
from strategies import instances
from truthsieve.core import build_label_matrix, build_rule_class, fit_consensus, own_best_rules, run_mechanism
from truthsieve.core.incentives import incentives
from truthsieve.core.rules import first_minimum
from truthsieve.exceptions import ClassIndexError, InputError, MechanismError

KINDS = ["constant", "threshold", "listed"]
DICTATORS = ["random_dictator", "weighted_dictator", "tuned_dictator"]


def features_for(kind: str) -> list[str]:
    return FEATURES if kind == "threshold" else []


def labelling_of(rule_class, rule: int) -> tuple[int, ...]:
    return tuple(int(v) for v in rule_class.predict(rule))


@pytest.mark.parametrize("n_classes", [3, 4])
@pytest.mark.parametrize("kind", KINDS)
@given(data=st.data())
def test_erm_and_every_risk_equal_rational_brute_force(kind, n_classes, data):
    instance = data.draw(instances(kind=kind, max_sources=3, max_items=5, n_classes=n_classes))
    matrix, rule_class = core_objects(instance, kind)
    rules = enumerate_rules(instance, kind, features_for(kind))
    assert rule_class.size == len(rules)
    assert [rule_class.describe(r) for r in range(rule_class.size)] == [form for form, _ in rules]
    assert [labelling_of(rule_class, r) for r in range(rule_class.size)] == [lab for _, lab in rules]
    exact = [global_risk(instance, lab) for _, lab in rules]
    np.testing.assert_allclose(rule_class.risks(matrix.global_costs()), [float(r) for r in exact], atol=1e-12)
    fit = fit_consensus(matrix, rule_class)
    form, labelling, risk = erm(instance, kind, features_for(kind))
    assert rule_class.describe(fit.rule) == form
    assert fit.risk == pytest.approx(float(risk), abs=1e-12)
    for source, rule in zip(matrix.source_ids, own_best_rules(matrix, rule_class)):
        assert rule_class.describe(int(rule)) == own_erm(instance, kind, features_for(kind), source)[0]


@pytest.mark.parametrize("n_classes", [2, 3, 4])
@pytest.mark.parametrize("seed", range(30))
def test_fast_threshold_fit_equals_the_first_minimum_of_every_risk(seed, n_classes):
    # Integer costs on few distinct feature values make exact ties between cuts and pairs
    # common; the pair-free ERM must pick the same rule as scanning all of them.
    rng = np.random.default_rng(seed)
    m = int(rng.integers(2, 40))
    items = pd.DataFrame({"item_id": [f"i{k:03d}" for k in range(m)], "f": rng.integers(0, 6, m).astype(float)})
    items["g"] = rng.integers(0, 3, m).astype(float)
    if items["f"].nunique() == 1:
        items.loc[0, "f"] = 9.0
    rule_class = build_rule_class("threshold", items, items["item_id"].to_numpy(), ["f", "g"], n_classes)
    costs = rng.integers(0, 3, (m, n_classes)).astype(float) / 4
    full = rule_class.risks(costs)
    index, risk = rule_class.fit_with_risk(costs)
    assert index == first_minimum(full)
    assert risk == full[index]
    subset = np.flatnonzero(rng.random(m) < 0.5)
    if len(subset):
        sparse = np.maximum(rule_class.linear_risks(costs[subset], items=subset), 0.0)
        assert rule_class.fit(costs[subset], items=subset) == first_minimum(sparse)


def expected_private_risk(instance: Instance, mechanism: str, kind: str, source: str, truth) -> Fraction:
    matrix, rule_class = core_objects(instance, kind)
    result = run_mechanism(mechanism, matrix, rule_class)
    return sum(
        (Fraction(e.probability) * private_risk(instance, source, labelling_of(rule_class, e.rule), truth) for e in result.lottery),
        Fraction(0),
    )


@pytest.mark.parametrize("mechanism", DICTATORS)
@pytest.mark.parametrize("kind", KINDS)
@settings(max_examples=15, deadline=None)
@given(data=st.data())
def test_no_source_gains_by_any_report_over_three_labels(mechanism, kind, data):
    """Exhaustive misreport search with K = 3: every source, every report in {0, 1, 2}^|S_i|."""
    from oracle import all_reports

    instance = data.draw(instances(kind=kind, max_sources=3, max_items=3, n_classes=3))
    for source in instance.sources:
        truth = instance.labels[source]
        truthful = expected_private_risk(instance, mechanism, kind, source, truth)
        for report in all_reports(instance, source):
            lied = expected_private_risk(instance.with_report(source, report), mechanism, kind, source, truth)
            # Probabilities are floats; the comparison allows their rounding only.
            assert lied >= truthful - Fraction(1, 10**12), (source, report)


def test_erm_is_manipulable_with_three_classes():
    """Two lots, constant class over {0, 1, 2}; A (weight 5) labels (0, 0), B (3) labels
    (1, 1), C (3) labels (2, 1). By hand, with total weight 11:
      R(all-0) = (5*0 + 3*1 + 3*1) / 11 = 6/11, R(all-1) = (5*1 + 0 + 3*1/2) / 11 = 13/22,
      R(all-2) = (5 + 3 + 3/2) / 11 = 19/22, so ERM labels everything 0 and C's risk is 1.
    If C reports (1, 1): R(all-1) = 5/11 < R(all-0) = 6/11, ERM labels everything 1, and C's
    true risk falls to 1/2 (its lot labelled 1 is right), a gain of 1/2; the true global
    risk rises from 6/11 to 13/22."""
    instance = Instance(
        n_items=2,
        labels={"A": {0: 0, 1: 0}, "B": {0: 1, 1: 1}, "C": {0: 2, 1: 1}},
        source_weights={"A": 5, "B": 3, "C": 3},
        item_weights=(1, 1),
        n_classes=3,
    )
    matrix, rule_class = core_objects(instance, "constant")
    truthful = run_mechanism("erm", matrix, rule_class)
    assert rule_class.describe(truthful.lottery[0].rule) == {"kind": "constant", "label": 0}
    assert truthful.expected_risk == pytest.approx(6 / 11)
    lied_matrix, _ = core_objects(instance.with_report("C", {0: 1, 1: 1}), "constant")
    lied = run_mechanism("erm", lied_matrix, rule_class)
    assert rule_class.describe(lied.lottery[0].rule) == {"kind": "constant", "label": 1}
    assert private_risk(instance, "C", (1, 1)) == Fraction(1, 2) < private_risk(instance, "C", (0, 0)) == 1
    assert global_risk(instance, (1, 1)) == Fraction(13, 22)
    assert exhaustive_erm_gain(instance, "constant", [], "C") == Fraction(1, 2)
    result = incentives(matrix, rule_class, fit_consensus(matrix, rule_class), budget=None)[2]
    assert result.source_id == "C" and result.gain_exact
    assert result.gain_lower == pytest.approx(0.5)
    assert rule_class.describe(result.target_rule) == {"kind": "constant", "label": 1}
    # One flip (lot 0: 2 -> 1) already gives R(all-1) = 5/11 < 6/11: the cheapest lie is one lot.
    assert result.lie_weight_upper == pytest.approx(1.0)


@pytest.mark.parametrize("mechanism", DICTATORS)
@pytest.mark.parametrize("kind", KINDS)
@settings(max_examples=40, deadline=None)
@given(data=st.data())
def test_guarantee_holds_with_three_classes(mechanism, kind, data):
    instance = data.draw(instances(kind=kind, max_sources=5, max_items=6, shared=True, n_classes=3))
    matrix, rule_class = core_objects(instance, kind)
    result = run_mechanism(mechanism, matrix, rule_class)
    registry = dict(instance.source_weights)
    lottery = dictator_lottery(instance, mechanism, kind, features_for(kind), registry)
    assert [e.probability for e in result.lottery] == pytest.approx([float(p) for _, p, _ in lottery], abs=1e-12)
    assert result.guarantee == pytest.approx(float(dictator_guarantee(instance, lottery)), abs=1e-12)
    assert result.guarantee_applies
    exact_expected = sum((p * global_risk(instance, lab) for _, p, lab in lottery), Fraction(0))
    optimum = erm(instance, kind, features_for(kind))[2]
    assert result.expected_risk == pytest.approx(float(exact_expected), abs=1e-12)
    if optimum == 0:
        assert exact_expected == 0  # every own ERM is then the common truth
    else:
        assert exact_expected / optimum <= dictator_guarantee(instance, lottery)


def tight_three_class_instance(weights: list[int], mechanism: str) -> Instance:
    """Shared inputs, K = 3, listed class {a_own, b_consensus}: the bound is reached exactly.

    Let k maximise p_k (1 - w_k) / w_k. Every source but k labels both lots 0, which is
    the rule ``b_consensus`` = (0, 0). Source k labels (1, 0); its rival ``a_own`` = (1, 2).
    Then d(a_own, y_k) = 1/2 (lot 1) = d(b_consensus, y_k) (lot 0): k's two rules tie and the
    tie-break (names sorted) gives k ``a_own``; every other source gets ``b_consensus``
    (risk 0). On each lot y_k equals one of the two rules, so the triangle inequality
    d(a_own, b_consensus) <= d(a_own, y_k) + d(y_k, b_consensus) = 1 holds with equality, as
    does d(a_own, y_j) = d(a_own, b_consensus) = 1 for j != k. So with delta = 1/2:
      r* = R(b) = w_k delta, R(a) = w_k delta + (1 - w_k) 2 delta,
      E[R] = r* + p_k (1 - w_k) 2 delta, ratio = 1 + 2 p_k (1 - w_k) / w_k: the guarantee.
    Our own construction; lot 1 uses the third class, which no binary instance can.
    """
    n, total = len(weights), sum(weights)
    w = [Fraction(x, total) for x in weights]
    probabilities = {
        "random_dictator": [Fraction(1, n)] * n,
        "weighted_dictator": w,
        "tuned_dictator": [x / (1 - x) / sum(y / (1 - y) for y in w) for x in w],
    }[mechanism]
    k = max(range(n), key=lambda i: probabilities[i] * (1 - w[i]) / w[i])
    labels = {f"src-{i}": {0: 0, 1: 0} for i in range(n)}
    labels[f"src-{k}"] = {0: 1, 1: 0}
    return Instance(
        n_items=2,
        labels=labels,
        source_weights={f"src-{i}": weights[i] for i in range(n)},
        item_weights=(1, 1),
        listed={"a_own": (1, 2), "b_consensus": (0, 0)},
        n_classes=3,
    )


@pytest.mark.parametrize(
    ("mechanism", "weights"),
    [("random_dictator", [1, 1, 1]), ("random_dictator", [1, 1, 1, 1, 1]), ("weighted_dictator", [1, 2, 3]), ("tuned_dictator", [1, 2, 5])],
)
def test_guarantee_is_reached_on_a_tight_three_class_instance(mechanism, weights):
    instance = tight_three_class_instance(weights, mechanism)
    matrix, rule_class = core_objects(instance, "listed")
    result = run_mechanism(mechanism, matrix, rule_class)
    lottery = dictator_lottery(instance, mechanism, "listed", [], dict(instance.source_weights))
    exact_ratio = sum((p * global_risk(instance, lab) for _, p, lab in lottery), Fraction(0)) / erm(instance, "listed", [])[2]
    assert exact_ratio == dictator_guarantee(instance, lottery)  # reached, in exact fractions
    assert result.ratio == pytest.approx(float(exact_ratio), abs=1e-12)
    assert result.ratio == pytest.approx(result.guarantee, abs=1e-12)
    if mechanism == "random_dictator" and len(set(weights)) == 1:
        assert result.guarantee == pytest.approx(3 - 2 / len(weights))


@pytest.mark.parametrize("mechanism", ["two_rule_vote", "two_rule_lottery"])
@pytest.mark.parametrize("n_classes", [3, 4])
def test_two_rule_mechanisms_refuse_more_than_two_classes(mechanism, n_classes):
    instance = Instance(n_items=2, labels={"a": {0: 2, 1: 0}}, source_weights={"a": 1}, item_weights=(1, 1), n_classes=n_classes)
    matrix, rule_class = core_objects(instance, "constant")
    with pytest.raises(MechanismError, match=f"exactly two rules.*{n_classes} rules") as caught:
        run_mechanism(mechanism, matrix, rule_class)
    assert isinstance(caught.value, InputError)  # the CLI's exit-2 family


def test_labels_and_listed_rules_outside_the_classes_are_refused():
    labels = pd.DataFrame({"item_id": ["a", "b"], "source_id": ["s", "s"], "label": [0, 3]})
    items = pd.DataFrame({"item_id": ["a", "b"], "rule__r": [0, 5]})
    with pytest.raises(ClassIndexError, match="label 3 in row 1"):
        build_label_matrix(labels, items, {"s": 1.0}, n_classes=3)
    with pytest.raises(ClassIndexError, match="'rule__r' holds 5 in row 1"):
        build_rule_class("listed", items, np.array(["a", "b"]), (), 3)


def random_batch(seed: int, kind: str, n_classes: int):
    """Larger than exhaustive search allows: partial coverage, uneven weights, a rule-shaped
    liar, tied feature values, listed rules of class indices."""
    rng = np.random.default_rng(seed)
    n_items, n_sources = int(rng.integers(20, 150)), int(rng.integers(2, 6))
    names = ["f0", "f1", "f2"]
    features = {f: np.round(rng.normal(0, 1, n_items), int(rng.integers(0, 3))) for f in names}
    items = pd.DataFrame({"item_id": [f"i{k:04d}" for k in rng.permutation(n_items)], **features})
    if seed % 3:
        items["item_weight"] = rng.choice([0.5, 1.0, 2.0, 3.0], n_items)
    edges = np.sort(rng.normal(0, 1, n_classes - 1))
    for r in range(int(rng.integers(1, 5))):
        items[f"rule__r{r}"] = np.digitize(features["f0"] + rng.normal(0, 0.3), edges)
    truth = np.digitize(features["f0"] + 0.5 * features["f1"], edges)
    rows = []
    for s in range(n_sources):
        covered = np.flatnonzero(rng.random(n_items) < (1.0 if seed % 2 else rng.uniform(0.2, 1.0)))
        covered = covered if len(covered) else np.array([0])
        if s == 0:
            labels = np.digitize(features[names[seed % 3]], edges)  # a rule-shaped liar
        else:
            noisy = rng.random(n_items) < rng.uniform(0.0, 0.4)
            labels = np.where(noisy, rng.integers(0, n_classes, n_items), truth)
        rows.append(pd.DataFrame({"item_id": items["item_id"].to_numpy()[covered], "source_id": f"s{s}", "label": labels[covered]}))
    weights = {f"s{s}": float(rng.choice([1.0, 2.0, 0.5, 3.0])) for s in range(n_sources)}
    matrix = build_label_matrix(pd.concat(rows, ignore_index=True), items, weights, n_classes=n_classes)
    rule_class = build_rule_class(kind, items, matrix.item_ids, names if kind == "threshold" else (), n_classes)
    return matrix, rule_class




@pytest.mark.parametrize("budget", [None, 3])
@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("seed", range(12))
def test_incentives_with_three_classes_equal_the_full_pass_oracle(seed, kind, budget):
    matrix, rule_class = random_batch(seed, kind, 3)
    assert_every_source_matches(matrix, rule_class, fit_consensus(matrix, rule_class), budget)


@pytest.mark.parametrize("kind", KINDS)
@settings(max_examples=25, deadline=None)
@given(data=st.data())
def test_exact_gain_and_pull_with_three_classes_equal_exhaustive_search(kind, data):
    instance = data.draw(instances(kind=kind, max_sources=3, max_items=4, n_classes=3))
    matrix, rule_class = core_objects(instance, kind)
    for result in incentives(matrix, rule_class, fit_consensus(matrix, rule_class), budget=None):
        assert result.gain_exact
        expected = exhaustive_erm_gain(instance, kind, features_for(kind), result.source_id)
        assert result.gain_lower == pytest.approx(float(expected), abs=1e-12)
        assert result.pull == pytest.approx(float(brute_force_pull(instance, kind, features_for(kind), result.source_id)), abs=1e-12)


@pytest.mark.parametrize("seed", range(10))
def test_sources_away_and_present_keep_participation_with_four_classes(seed):
    # The participation argument (module docstring of mechanisms) uses no property of the
    # labels: checked against the oracle's lotteries with K = 4.
    from oracle import lottery_private_risk, without

    rng = np.random.default_rng(500 + seed)
    kind = KINDS[seed % 3]
    instance = rng_instance(rng, int(rng.integers(2, 5)), int(rng.integers(2, 6)), bool(seed % 2), kind, n_classes=4)
    registry = dict(instance.source_weights)
    for mechanism in DICTATORS:
        present = dictator_lottery(instance, mechanism, kind, features_for(kind), registry)
        matrix, rule_class = core_objects(instance, kind)
        result = run_mechanism(mechanism, matrix, rule_class, registry_weights=registry)
        assert [rule_class.describe(e.rule) for e in result.lottery] == [
            next(form for form, lab in enumerate_rules(instance, kind, features_for(kind)) if lab == labelling)
            for _, _, labelling in present
        ]
        for source in instance.sources:
            away = dictator_lottery(without(instance, source), mechanism, kind, features_for(kind), registry)
            truth = instance.labels[source]
            assert lottery_private_risk(instance, present, source, truth) <= lottery_private_risk(instance, away, source, truth)


@pytest.mark.parametrize("mechanism", ["erm", *DICTATORS])
@settings(max_examples=30, deadline=None)
@given(data=st.data(), seed=st.integers(0, 2**32 - 1), scale=st.integers(2, 50))
def test_three_class_results_ignore_row_order_source_names_and_weight_scale(mechanism, data, seed, scale):
    instance = data.draw(instances(kind="threshold", n_classes=3))
    labels, items = instance.frames()
    rng = np.random.default_rng(seed)

    def run(label_rows, item_rows, weights):
        matrix = build_label_matrix(label_rows, item_rows, weights, n_classes=3)
        rule_class = build_rule_class("threshold", item_rows, matrix.item_ids, FEATURES, 3)
        result = run_mechanism(mechanism, matrix, rule_class)
        return [rule_class.describe(e.rule) for e in result.lottery], [e.probability for e in result.lottery], result.expected_risk

    base = run(labels, items, instance.source_weights)
    # Renaming keeps the sorted order of sources, so lottery entries line up by position.
    rename = {s: f"renamed-{k:02d}" for k, s in enumerate(sorted(instance.source_weights))}
    shuffled = labels.sample(frac=1.0, random_state=rng).replace({"source_id": rename})
    scaled_items = items.sample(frac=1.0, random_state=rng).assign(item_weight=lambda t: t["item_weight"] * scale)
    other = run(shuffled, scaled_items, {rename[s]: w * scale for s, w in instance.source_weights.items()})
    assert base[0] == other[0]
    assert base[1] == pytest.approx(other[1], abs=1e-12)
    assert base[2] == pytest.approx(other[2], abs=1e-12)
