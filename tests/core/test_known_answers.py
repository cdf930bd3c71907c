"""Known answers from hand calculations and published procedures: the ERM tie-break at an
exact tie, and Holm's correction deciding a drift flag."""

from __future__ import annotations

import pandas as pd
import pytest

from truthsieve.core import build_label_matrix, build_rule_class, fit_consensus, source_incentive
from truthsieve.core.dawid_skene import dawid_skene
from truthsieve.core.source_checks import FlagThresholds, SourceHistory, assess_sources


def one_source(labels, features: dict, weights=None):
    n = len(labels)
    items = pd.DataFrame({"item_id": [f"i{k}" for k in range(n)], **features})
    if weights is not None:
        items["item_weight"] = weights
    long = pd.DataFrame({"item_id": items["item_id"], "source_id": "s", "label": labels})
    return build_label_matrix(long, items, {"s": 1.0}), items


def test_an_exact_tie_between_two_cuts_goes_to_the_earlier_cut():
    # x = 1, 2, 3, 4 with labels 0, 1, 0, 1 (unit weights). By hand:
    #   all-0: 2/4, all-1: 2/4; "x > 1.5 -> 1" predicts 0,1,1,1: 1 error, 1/4;
    #   "x > 2.5 -> 1": 2/4; "x > 3.5 -> 1" predicts 0,0,0,1: 1 error, 1/4; every above=0 cut >= 2/4.
    # Two rules tie at exactly 1/4; the documented order (cuts increasing) picks x > 1.5.
    matrix, items = one_source([0, 1, 0, 1], {"x": [1.0, 2.0, 3.0, 4.0]})
    rule_class = build_rule_class("threshold", items, matrix.item_ids, ["x"])
    fit = fit_consensus(matrix, rule_class)
    rule = rule_class.describe(fit.rule)
    assert (rule["feature"], rule["cut"], rule["above"]) == ("x", 1.5, 1)
    assert fit.risk == pytest.approx(0.25, abs=1e-15)


def test_an_exact_tie_across_features_goes_to_the_earlier_feature():
    # Feature y is x reversed, so both features reach risk 1/4; with features listed [y, x],
    # y's rules come first. By hand on y = 4, 3, 2, 1: "y > 1.5 -> 0" predicts 0,0,0,1
    # (1 error, 1/4) and is y's first rule (the constants, at 2/4, come before it).
    matrix, items = one_source([0, 1, 0, 1], {"x": [1.0, 2.0, 3.0, 4.0], "y": [4.0, 3.0, 2.0, 1.0]})
    rule_class = build_rule_class("threshold", items, matrix.item_ids, ["y", "x"])
    rule = rule_class.describe(fit_consensus(matrix, rule_class).rule)
    assert (rule["feature"], rule["cut"], rule["above"]) == ("y", 1.5, 0)


def test_a_tie_only_up_to_float_rounding_still_goes_to_the_earlier_rule():
    # Listed rules, sorted by name: rule__a errs on the items of weight 0.1 and 0.2, rule__b on
    # the item of weight 0.3. Exactly, both risks are 0.3 / 0.6 = 1/2; in floats 0.1 + 0.2
    # exceeds 0.3 by one ulp, so a plain argmin would pick rule__b.
    weights = [0.1, 0.2, 0.3]
    matrix, items = one_source([0, 0, 0], {}, weights=weights)
    items["rule__a"] = [True, True, False]
    items["rule__b"] = [False, False, True]
    rule_class = build_rule_class("listed", items, matrix.item_ids, ())
    fit = fit_consensus(matrix, rule_class)
    assert rule_class.describe(fit.rule)["name"] == "a"
    assert fit.risk == pytest.approx(0.5, abs=1e-12)


def test_holm_correction_keeps_a_drift_flag_down_that_the_raw_p_value_would_raise():
    # One source, constant rule class. Tonight 100 items, 60 positives; the history pools 100
    # items with 45 positives and, like tonight, 40 disagreements with the consensus (all-1).
    # Pooled two-proportion z-test on the positive rate, by hand: P = 105/200 = 0.525,
    # var = 0.525 * 0.475 * (1/100 + 1/100) = 0.0049875, z = 0.15 / 0.070622 = 2.1240,
    # p = 2 (1 - Phi(2.1240)) = 0.0337. The disagreement rate is unchanged: z = 0, p = 1.
    # Holm over the m = 2 tests ("A simple sequentially rejective multiple test procedure",
    # Scandinavian Journal of Statistics, 1979): the smallest p is multiplied by m = 2,
    # giving 0.0673 > alpha = 0.05, so no drift flag; uncorrected, 0.0337 < 0.05 would flag.
    from statsmodels.stats.proportion import proportions_ztest

    labels = [1] * 60 + [0] * 40
    matrix, items = one_source(labels, {})
    rule_class = build_rule_class("constant", items, matrix.item_ids, ())
    consensus = fit_consensus(matrix, rule_class)
    assert rule_class.describe(consensus.rule) == {"kind": "constant", "label": 1}
    incentive = source_incentive(matrix, rule_class, consensus, 0)
    reliability = dawid_skene(matrix.labels, matrix.labelled)
    history = {"s": SourceHistory(batches=1, items=100, positives=45, disagreements=40)}
    thresholds = FlagThresholds(drift_alpha=0.05)
    [report] = assess_sources(matrix, rule_class.predict(consensus.rule), [incentive], reliability, history, thresholds)

    z, raw = proportions_ztest([60, 45], [100, 100])  # reference library, pooled variance
    assert z == pytest.approx(2.1240, abs=1e-4) and raw == pytest.approx(0.0337, abs=1e-4)
    assert report.drift_positive_rate_p == pytest.approx(2 * raw, rel=1e-9)
    assert report.drift_disagreement_p == pytest.approx(1.0)
    assert raw < thresholds.drift_alpha < report.drift_positive_rate_p
    assert "drift_positive_rate" not in report.flags
