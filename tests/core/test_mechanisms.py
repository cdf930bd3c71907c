"""One contract test over every mechanism: exact lotteries, strategy-proofness, guarantees."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from core_support import FEATURES, core_objects
from oracle import Instance, all_reports, erm, global_risk, private_risk
from strategies import instances
from truthsieve.core import MECHANISMS, build_label_matrix, build_rule_class, run_mechanism
from truthsieve.core.mechanisms import MECHANISM_REGISTRY
from truthsieve.exceptions import MechanismError, NoItemsError, NoSourcesError, UnknownReferenceError, WeightError

# What each mechanism claims and accepts comes from its registry entry.
STRATEGY_PROOF = [m.name for m in MECHANISM_REGISTRY if m.strategy_proof]


def kinds_for(mechanism: str) -> list[str]:
    return list(MECHANISM_REGISTRY.get(mechanism).accepted_kinds())


CASES = [(m, k) for m in MECHANISMS for k in kinds_for(m)]
SP_CASES = [(m, k) for m, k in CASES if m in STRATEGY_PROOF]


def labelling_of(rule_class, rule: int) -> tuple[int, ...]:
    return tuple(rule_class.predict(rule).astype(int))


def expected_private_risk(instance: Instance, mechanism: str, kind: str, source: str, truth) -> float:
    matrix, rule_class = core_objects(instance, kind)
    result = run_mechanism(mechanism, matrix, rule_class)
    return sum(
        e.probability * float(private_risk(instance, source, labelling_of(rule_class, e.rule), truth))
        for e in result.lottery
    )


@pytest.mark.parametrize(("mechanism", "kind"), CASES)
@given(data=st.data())
def test_lottery_is_exact(mechanism, kind, data):
    instance = data.draw(instances(kind=kind))
    matrix, rule_class = core_objects(instance, kind)
    result = run_mechanism(mechanism, matrix, rule_class)
    assert sum(e.probability for e in result.lottery) == pytest.approx(1.0, abs=1e-12)
    assert all(e.probability >= 0 for e in result.lottery)
    exact = sum(
        (Fraction(e.probability) * global_risk(instance, labelling_of(rule_class, e.rule)) for e in result.lottery),
        Fraction(0),
    )
    assert result.expected_risk == pytest.approx(float(exact), abs=1e-12)
    optimum = erm(instance, kind, FEATURES)[2]
    if optimum > 0:
        assert result.ratio == pytest.approx(float(exact / optimum), rel=1e-9)


@pytest.mark.parametrize(("mechanism", "kind"), SP_CASES)
@given(data=st.data())
def test_no_source_gains_by_any_report(mechanism, kind, data):
    """Exhaustive misreport search: every source, every possible report on its items."""
    instance = data.draw(instances(kind=kind, max_sources=3, max_items=4))
    for source in instance.sources:
        truth = instance.labels[source]
        truthful = expected_private_risk(instance, mechanism, kind, source, truth)
        for report in all_reports(instance, source):
            lied = expected_private_risk(instance.with_report(source, report), mechanism, kind, source, truth)
            assert lied >= truthful - 1e-12, (source, report)


def manipulable_instance() -> Instance:
    # Five shared lots, three equally weighted graders. Hand calculation:
    # R(all-1) = (2/5 + 1 + 2/5)/3 = 3/5, R(all-0) = (3/5 + 0 + 3/5)/3 = 2/5, so ERM rejects all.
    # If src-0 reports all-1: R(all-1) = (0 + 1 + 2/5)/3 = 7/15 < R(all-0) = 8/15, ERM accepts all,
    # src-0's true risk falls from 3/5 to 2/5 and the true global risk rises from 2/5 to 3/5.
    return Instance(
        n_items=5,
        labels={
            "src-0": dict(enumerate([1, 1, 1, 0, 0])),
            "src-1": dict(enumerate([0, 0, 0, 0, 0])),
            "src-2": dict(enumerate([1, 1, 1, 0, 0])),
        },
        source_weights={"src-0": 1, "src-1": 1, "src-2": 1},
        item_weights=(1, 1, 1, 1, 1),
    )


def test_erm_is_manipulable_on_a_hand_computed_instance():
    instance = manipulable_instance()
    matrix, rule_class = core_objects(instance, "constant")
    truthful = run_mechanism("erm", matrix, rule_class)
    assert rule_class.describe(truthful.lottery[0].rule) == {"kind": "constant", "label": 0}
    assert truthful.expected_risk == pytest.approx(2 / 5)
    lie_matrix, _ = core_objects(instance.with_report("src-0", dict(enumerate([1] * 5))), "constant")
    lied = run_mechanism("erm", lie_matrix, rule_class)
    assert rule_class.describe(lied.lottery[0].rule) == {"kind": "constant", "label": 1}
    truth = instance.labels["src-0"]
    assert private_risk(instance, "src-0", (1,) * 5, truth) == Fraction(2, 5) < Fraction(3, 5)
    assert global_risk(instance, (1,) * 5) == Fraction(3, 5) > Fraction(2, 5)


@pytest.mark.parametrize(("mechanism", "kind"), [c for c in CASES if c[0] != "erm"])
@given(data=st.data())
def test_worst_case_guarantee_holds(mechanism, kind, data):
    shared = None if mechanism.startswith("two_rule") else True
    instance = data.draw(instances(kind=kind, max_sources=5, max_items=6, shared=shared))
    matrix, rule_class = core_objects(instance, kind)
    result = run_mechanism(mechanism, matrix, rule_class)
    assert result.guarantee_applies
    if result.ratio is not None:
        assert result.ratio <= result.guarantee + 1e-9
    else:
        pytest.fail("positive expected risk with a zero consensus risk breaks every guarantee")


@given(data=st.data())
def test_dictator_guarantees_match_the_published_closed_forms(data):
    instance = data.draw(instances(kind="constant", max_sources=6, shared=True))
    matrix, rule_class = core_objects(instance, "constant")
    w = matrix.source_weights
    n = len(w)
    if n == 1:
        return
    # "Algorithms for strategyproof classification",
    # Artificial Intelligence 186, 2012: 3 - 2/n for the uniform dictator with equal weights.
    tuned = run_mechanism("tuned_dictator", matrix, rule_class).guarantee
    assert tuned == pytest.approx(1 + 2 / float(np.sum(w / (1 - w))))
    assert run_mechanism("weighted_dictator", matrix, rule_class).guarantee == pytest.approx(3 - 2 * w.min())
    if np.allclose(w, w[0]):
        assert run_mechanism("random_dictator", matrix, rule_class).guarantee == pytest.approx(3 - 2 / n)
        assert tuned == pytest.approx(3 - 2 / n)


def tight_dictator_family(weights: list[int], mechanism: str, size: int) -> Instance:
    """Shared-input family whose ratio approaches the dictator bound as ``size`` grows.

    The consensus is the all-0 listed rule. Only the source ``k`` maximising
    ``p_k (1 - w_k) / w_k`` disagrees with it, on ``size`` lots ``A``; its own best
    rule accepts ``A`` and ``size - 1`` further lots ``B`` that everyone else rejects,
    so the triangle inequality behind the bound is tight up to the ``-1``. Our own
    construction.
    """
    n = len(weights)
    total = sum(weights)
    w = [x / total for x in weights]
    probabilities = {
        "random_dictator": [1 / n] * n,
        "weighted_dictator": w,
        "tuned_dictator": [x / (1 - x) / sum(y / (1 - y) for y in w) for x in w],
    }[mechanism]
    k = max(range(n), key=lambda i: probabilities[i] * (1 - w[i]) / w[i])
    m = 2 * size - 1 + 1  # A, B and one lot everyone rejects
    labels = {f"src-{i}": {j: 0 for j in range(m)} for i in range(n)}
    labels[f"src-{k}"].update({j: 1 for j in range(size)})
    own = tuple(j < 2 * size - 1 for j in range(m))
    return Instance(
        n_items=m,
        labels=labels,
        source_weights={f"src-{i}": weights[i] for i in range(n)},
        item_weights=(1,) * m,
        listed={"all_reject": (False,) * m, "accept_a_and_b": own},
    )


@pytest.mark.parametrize(
    ("mechanism", "weights"),
    [("random_dictator", [1, 1, 1]), ("random_dictator", [1, 1, 1, 1, 1]), ("weighted_dictator", [1, 2, 3]), ("tuned_dictator", [1, 2, 5])],
)
def test_dictator_bound_is_approached_on_a_tight_family(mechanism, weights):
    ratios = []
    for size in (5, 50, 500):
        matrix, rule_class = core_objects(tight_dictator_family(weights, mechanism, size), "listed")
        result = run_mechanism(mechanism, matrix, rule_class)
        ratios.append(result.ratio)
        assert result.ratio <= result.guarantee + 1e-12
    assert ratios[0] < ratios[1] < ratios[2]
    assert ratios[2] > result.guarantee - 0.01


def test_two_rule_bounds_are_reached():
    # Vote: weight 1/2+e votes 1 with q slightly above 1/2, the rest are all-0 (our own construction).
    # R(1) ~ (1/2)(1/2) + 1/2 = 3/4, R(0) ~ (1/2)(1/2) = 1/4: ratio -> 3 ("a tale of two functions", AAAI 2008).
    # Lottery at t = 1/2: P(all-1) = 1/2; R(1) = 3/4, R(0) = 1/4, expected = 1/2: ratio 2.
    def batch(q_ones: int, m: int, w_voter: int, w_other: int) -> Instance:
        return Instance(
            n_items=m,
            labels={"a": {j: int(j < q_ones) for j in range(m)}, "b": {j: 0 for j in range(m)}},
            source_weights={"a": w_voter, "b": w_other},
            item_weights=(1,) * m,
        )

    votes, lotteries = [], []
    for m in (10, 100, 1000):
        vote = run_mechanism("two_rule_vote", *core_objects(batch(m // 2 + 1, m, m + 1, m - 1), "constant"))
        lottery = run_mechanism("two_rule_lottery", *core_objects(batch(m // 2 + 1, m, 1, 1), "constant"))
        assert vote.ratio <= 3 and lottery.ratio <= 2
        votes.append(vote.ratio)
        lotteries.append(lottery.ratio)
    assert votes == sorted(votes) and votes[-1] > 2.98
    assert lotteries == sorted(lotteries) and lotteries[-1] > 1.98


@pytest.mark.parametrize("mechanism", MECHANISMS)
def test_single_source_gets_ratio_one(mechanism):
    instance = Instance(n_items=3, labels={"solo": {0: 1, 1: 1, 2: 0}}, source_weights={"solo": 2}, item_weights=(1, 1, 1))
    result = run_mechanism(mechanism, *core_objects(instance, "constant"))
    # One source (majority label 1): every mechanism returns its own best rule, all-1.
    assert result.ratio == pytest.approx(1.0)
    assert result.expected_risk == pytest.approx(1 / 3)
    if not mechanism.startswith("two_rule"):
        assert result.guarantee == 1.0


@pytest.mark.parametrize("mechanism", MECHANISMS)
@given(data=st.data(), seed=st.integers(0, 2**32 - 1))
def test_invariant_to_row_order_and_source_renaming(mechanism, data, seed):
    kind = "constant" if mechanism.startswith("two_rule") else "threshold"
    instance = data.draw(instances(kind=kind))
    labels, items = instance.frames()
    rng = np.random.default_rng(seed)
    matrix = build_label_matrix(labels, items, instance.source_weights)
    rule_class = build_rule_class(kind, items, matrix.item_ids, FEATURES)
    base = run_mechanism(mechanism, matrix, rule_class)

    # Renaming keeps the sorted order of sources so lottery entries line up by position.
    rename = {s: f"renamed-{k:02d}" for k, s in enumerate(sorted(instance.source_weights))}
    shuffled = labels.sample(frac=1.0, random_state=rng).replace({"source_id": rename})
    items_shuffled = items.sample(frac=1.0, random_state=rng)
    matrix2 = build_label_matrix(shuffled, items_shuffled, {rename[s]: w for s, w in instance.source_weights.items()})
    rule_class2 = build_rule_class(kind, items_shuffled, matrix2.item_ids, FEATURES)
    other = run_mechanism(mechanism, matrix2, rule_class2)
    assert [rule_class.describe(e.rule) for e in base.lottery] == [rule_class2.describe(e.rule) for e in other.lottery]
    assert [e.probability for e in base.lottery] == pytest.approx([e.probability for e in other.lottery])
    assert [e.source_id and rename[e.source_id] for e in base.lottery] == [e.source_id for e in other.lottery]
    assert base.expected_risk == pytest.approx(other.expected_risk)


@pytest.mark.parametrize("mechanism", MECHANISMS)
@given(data=st.data(), scale=st.integers(2, 50))
def test_scaling_every_weight_changes_nothing(mechanism, data, scale):
    kind = "constant" if mechanism.startswith("two_rule") else "threshold"
    instance = data.draw(instances(kind=kind))
    labels, items = instance.frames()
    scaled_items = items.assign(item_weight=items["item_weight"] * scale)
    results = []
    for source_scale, frame in ((1, items), (scale, scaled_items)):
        matrix = build_label_matrix(labels, frame, {s: w * source_scale for s, w in instance.source_weights.items()})
        rule_class = build_rule_class(kind, frame, matrix.item_ids, FEATURES)
        result = run_mechanism(mechanism, matrix, rule_class)
        results.append(([rule_class.describe(e.rule) for e in result.lottery], [e.probability for e in result.lottery], result.expected_risk))
    assert results[0][0] == results[1][0]
    assert results[0][1] == pytest.approx(results[1][1])
    assert results[0][2] == pytest.approx(results[1][2])


def test_two_rule_mechanism_on_another_class_raises():
    instance = Instance(n_items=2, labels={"a": {0: 1, 1: 0}}, source_weights={"a": 1}, item_weights=(1, 1), features={"moisture_pct": (1.0, 2.0), "falling_number_s": (1.0, 1.0)})
    with pytest.raises(MechanismError, match="constant rule class"):
        run_mechanism("two_rule_lottery", *core_objects(instance, "threshold"))
    with pytest.raises(MechanismError, match="unknown mechanism"):
        run_mechanism("median_voter", *core_objects(instance, "threshold"))


@pytest.mark.parametrize(
    ("labels", "items", "weights", "error"),
    [
        (pd.DataFrame(columns=["item_id", "source_id", "label"]), pd.DataFrame({"item_id": ["a"]}), {}, NoSourcesError),
        (pd.DataFrame({"item_id": ["a"], "source_id": ["s"], "label": [1]}), pd.DataFrame({"item_id": []}), {"s": 1}, NoItemsError),
        (pd.DataFrame({"item_id": ["a"], "source_id": ["s"], "label": [1]}), pd.DataFrame({"item_id": ["a"]}), {"s": 0}, WeightError),
        (pd.DataFrame({"item_id": ["a"], "source_id": ["s"], "label": [1]}), pd.DataFrame({"item_id": ["a"]}), {"s": -2}, WeightError),
        (pd.DataFrame({"item_id": ["a"], "source_id": ["s"], "label": [1]}), pd.DataFrame({"item_id": ["a"]}), {}, UnknownReferenceError),
        (pd.DataFrame({"item_id": ["z"], "source_id": ["s"], "label": [1]}), pd.DataFrame({"item_id": ["a"]}), {"s": 1}, UnknownReferenceError),
        (pd.DataFrame({"item_id": ["a"], "source_id": ["s"], "label": [1]}), pd.DataFrame({"item_id": ["a"], "item_weight": [0.0]}), {"s": 1}, NoItemsError),
        (pd.DataFrame({"item_id": ["a"], "source_id": ["s"], "label": [1]}), pd.DataFrame({"item_id": ["a"], "item_weight": [-1.0]}), {"s": 1}, WeightError),
    ],
)
def test_impossible_inputs_raise_specific_errors(labels, items, weights, error):
    with pytest.raises(error):
        build_label_matrix(labels, items, weights)


DICTATORS = ["random_dictator", "weighted_dictator", "tuned_dictator"]


@pytest.mark.parametrize("mechanism", DICTATORS)
@pytest.mark.parametrize("kind", ["constant", "threshold", "listed"])
@pytest.mark.parametrize("seed", range(12))
def test_no_source_gains_by_staying_away(mechanism, kind, seed):
    from oracle import dictator_guarantee, dictator_lottery, lottery_private_risk, rng_instance, without

    rng = np.random.default_rng(seed)
    instance = rng_instance(rng, int(rng.integers(2, 5)), int(rng.integers(2, 6)), bool(seed % 2), kind)
    registry = dict(instance.source_weights)
    features = FEATURES if kind == "threshold" else []
    present = dictator_lottery(instance, mechanism, kind, features, registry)

    matrix, rule_class = core_objects(instance, kind)
    result = run_mechanism(mechanism, matrix, rule_class, registry_weights=registry)
    assert [e.probability for e in result.lottery] == pytest.approx([float(p) for _, p, _ in present], abs=1e-12)
    assert result.guarantee == pytest.approx(float(dictator_guarantee(instance, present)), abs=1e-12)

    for source in instance.sources:
        truth = instance.labels[source]
        away = without(instance, source)
        absent_lottery = dictator_lottery(away, mechanism, kind, features, registry)
        assert lottery_private_risk(instance, present, source, truth) <= lottery_private_risk(instance, absent_lottery, source, truth)
        # the core's lottery without the source matches the oracle's
        matrix_away, rule_class_away = core_objects(away, kind)
        result_away = run_mechanism(mechanism, matrix_away, rule_class_away, registry_weights=registry)
        assert [e.probability for e in result_away.lottery] == pytest.approx([float(p) for _, p, _ in absent_lottery], abs=1e-12)
        assert result_away.guarantee == pytest.approx(float(dictator_guarantee(away, absent_lottery)), abs=1e-12)


def test_tuned_dictator_participation_on_the_hand_instance():
    """Registry weights A=6, i=2, B=C=1; one lot; A and i accept it, B and C reject it.

    Own best rules: A and i accept everything, B and C reject everything, so i's risk
    is 1 exactly when B or C is drawn. Registry shares 6/10, 2/10, 1/10, 1/10 give odds
    v/(1-v) = 3/2, 1/4, 1/9, 1/9.
      present: P(B or C) = (2/9) / (3/2 + 1/4 + 2/9) = (8/36) / (71/36) = 8/71 = 0.1127
      away, fixed odds: (2/9) / (3/2 + 2/9) = (4/18) / (31/18) = 4/31 = 0.1290  >= 8/71
      away, old odds renormalised over A, B, C (6/8, 1/8, 1/8 -> 3, 1/7, 1/7):
            (2/7) / (23/7) = 2/23 = 0.0870  < 8/71: staying away paid.
    Guarantee away (fixed): p = 27/31, 2/31, 2/31 with w = 3/4, 1/8, 1/8 present:
      max(27/31 * (1/4)/(3/4), 2/31 * (7/8)/(1/8)) = 14/31 -> 1 + 28/31 = 59/31.
    """
    registry = {"A": 6, "i": 2, "B": 1, "C": 1}
    instance = Instance(
        n_items=1,
        labels={"A": {0: 1}, "i": {0: 1}, "B": {0: 0}, "C": {0: 0}},
        source_weights=registry,
        item_weights=(1,),
    )

    def risk_of_i(batch, registry_weights):
        matrix, rule_class = core_objects(batch, "constant")
        result = run_mechanism("tuned_dictator", matrix, rule_class, registry_weights=registry_weights)
        return sum(e.probability * float(private_risk(instance, "i", labelling_of(rule_class, e.rule))) for e in result.lottery), result

    from oracle import without

    present, _ = risk_of_i(instance, registry)
    away, result_away = risk_of_i(without(instance, "i"), registry)
    assert present == pytest.approx(8 / 71, abs=1e-12)
    assert away == pytest.approx(4 / 31, abs=1e-12)
    assert present <= away
    assert result_away.guarantee == pytest.approx(59 / 31, abs=1e-12)
    # The old formula (odds from weights renormalised over the sources present): the
    # registry is then just the sources present, and staying away pays.
    old_away, _ = risk_of_i(without(instance, "i"), None)
    assert old_away == pytest.approx(2 / 23, abs=1e-12)
    assert old_away < present
