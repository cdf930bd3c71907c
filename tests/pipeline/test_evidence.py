"""Flag evidence in words (pipeline/evidence.py): values beside limits, the direction of a
shift against a source's own pooled history, and what a sender does about each error.

Known answers by hand, from RoutingPolicy's defaults (pipeline/config.py): max_disagreement
0.2, Wilson confidence 0.95, min_kappa 0.5, drift_alpha 0.01.
"""

from __future__ import annotations

import pytest

from decision_support import source_entry
from truthsieve.core.source_checks import SourceHistory
from truthsieve.pipeline.config import RoutingPolicy
from truthsieve.pipeline.evidence import FIXES, fix_for, flag_sentence, past_rates

POLICY = RoutingPolicy()


def test_past_rates_pool_the_earlier_counts():
    # 90 of 200 earlier labels accepted, 30 of 200 differed from the fit: 0.45 and 0.15
    history = {"north": SourceHistory(batches=2, items=200, positives=90, disagreements=30), "new": SourceHistory(0, 0, 0, 0)}
    assert past_rates(history, "north") == {"positive_rate": 0.45, "disagreement": 0.15}
    assert past_rates(history, "new") == {}  # no earlier items: no rate, not 0/0
    assert past_rates(history, "south") == {} and past_rates(None, "north") == {}


@pytest.mark.parametrize(
    "past, words",
    [
        ({"positive_rate": 0.45}, "up from 45.0 % over its earlier nights to 60.0 % tonight"),
        ({"positive_rate": 0.7}, "down from 70.0 % over its earlier nights to 60.0 % tonight"),
        ({"positive_rate": 0.6}, "unchanged from 60.0 % over its earlier nights to 60.0 % tonight"),
        ({}, "compared with its own earlier nights"),
    ],
)
def test_a_shift_says_which_way_it_went(past, words):
    source = source_entry(positive_rate=0.6, drift_positive_rate_p=0.00042)
    sentence = flag_sentence("drift_positive_rate", source, POLICY, past)
    assert sentence == (
        f"the share of lots accepted moved: {words}; adjusted p = 0.00042, below 0.01 "
        "[statistic: two-proportion z-test, Holm-adjusted]"
    )


def test_the_disagreement_shift_reads_the_disagreement_not_the_accept_rate():
    source = source_entry(positive_rate=0.6, disagreement=0.3, drift_disagreement_p=0.004)
    sentence = flag_sentence("drift_disagreement", source, POLICY, {"positive_rate": 0.1, "disagreement": 0.1})
    assert "up from 10.0 % over its earlier nights to 30.0 % tonight; adjusted p = 0.004, below 0.01" in sentence


def test_far_from_consensus_gives_the_value_the_limit_and_the_wilson_range():
    source = source_entry(disagreement=0.31, disagreement_interval=(0.26, 0.36))
    assert flag_sentence("far_from_consensus", source, POLICY) == (
        "these grades differ from the shared fit on 31.0 % of lots, above the limit of 20.0 % (95 % range 26.0 % to 36.0 %) "
        "[statistic: disagreement with the consensus rule, Wilson interval]"
    )


def test_low_agreement_prints_kappa_to_three_places_and_an_unknown_code_is_itself():
    sentence = flag_sentence("low_agreement", source_entry(kappa=0.2134), POLICY)
    assert "0.213, below the minimum of 0.5 [statistic: Cohen's kappa]" in sentence
    assert flag_sentence("no_such_flag", source_entry(), POLICY) == "no_such_flag"


def test_each_error_code_has_its_fix_and_an_unknown_one_the_general_advice():
    assert fix_for("grade_not_0_or_1") == "grade every lot 0 (reject) or 1 (accept)"
    assert fix_for("link_outside_inbox") == "deliver the file itself, not a link"
    general = fix_for("not_a_code")
    assert general == "correct the file as the message says and deliver it again" and general not in FIXES.values()


def test_every_renamed_error_code_has_its_own_fix():
    # A sender told only "correct the file as the message says" for a code truthsieve names
    # itself (records.CODE_OF_FORMER) is left guessing; each such code carries a fix.
    from truthsieve.pipeline.records import CODE_OF_FORMER

    assert sorted(code for code in set(CODE_OF_FORMER.values()) if code not in FIXES) == []
    assert "registered id" in fix_for("source_name_not_allowed")
