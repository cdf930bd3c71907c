"""The demo's strategic member: tempted while honest, pulls the fit once it lies, and only it
pulls the most; its weight is short of a majority, so its honest grades do not dictate."""

from __future__ import annotations

import pytest

from truthsieve.pipeline import demo
from night_support import decide, demo_nights_inbox, ingest_batch


@pytest.fixture(scope="module")
def demo_nights(tmp_path_factory):
    """Every night's decision (no history: each night alone), the strategic member's entry."""
    inbox, dates, config = demo_nights_inbox(tmp_path_factory.mktemp("demo-inbox"))
    return config, [decide(ingest_batch(inbox, date, config), config, {})[0] for date in dates]


def test_strategic_member_is_heavy_but_short_of_a_weighted_majority():
    weights = {s: w for s, w, _ in demo.GRADERS}
    total = sum(weights.values())
    # 8 of 17.5: under one half, so alone it never outweighs the rest; with its ally (1) it does.
    assert weights[demo.STRATEGIC] < total / 2 < weights[demo.STRATEGIC] + weights["farm-dunmore"]
    assert weights[demo.STRATEGIC] == max(weights.values())


def test_strategic_member_has_the_largest_pull_on_every_night_it_lies(demo_nights):
    config, decisions = demo_nights
    lying = [d for k, d in enumerate(decisions, start=1) if k >= demo.STRATEGIC_FROM and any(s["source_id"] == demo.STRATEGIC for s in d["sources"])]
    assert len(lying) == demo.STORM_NIGHT - demo.STRATEGIC_FROM  # night 14: it did not deliver (storm)
    for d in lying:
        pulls = {s["source_id"]: s["pull"] for s in d["sources"]}
        cedar = next(s for s in d["sources"] if s["source_id"] == demo.STRATEGIC)
        assert pulls[demo.STRATEGIC] > max(p for s, p in pulls.items() if s != demo.STRATEGIC), d["batch_date"]
        assert pulls[demo.STRATEGIC] >= config.routing.max_pull
        assert {"pulls_fit", "rule_shaped"} <= set(cedar["flags"])
        # the ERM counterfactual: the lie moved the fit past the cut the others fit without it
        assert d["consensus"]["rule"]["cut"] > cedar["others_rule"]["cut"]
        assert d["route"] == "aggregate"  # strategy_proof: flags never change the route


def test_strategic_member_is_tempted_under_erm_before_it_bends(demo_nights):
    _, decisions = demo_nights
    honest = decisions[: demo.STRATEGIC_FROM - 1]
    gains = [next(s for s in d["sources"] if s["source_id"] == demo.STRATEGIC)["gain_lower"] for d in honest]
    assert max(gains) > 0  # a positive temptation on at least one honest night
    before = decisions[demo.STRATEGIC_FROM - 2]
    cedar = next(s for s in before["sources"] if s["source_id"] == demo.STRATEGIC)
    assert "pulls_fit" not in cedar["flags"] and max(s["pull"] for s in before["sources"]) < 0.02
    # honest grades do not dictate: the fit is the majority's 14 % cut, not cedar's own 14.5 %
    assert before["consensus"]["rule"]["cut"] < cedar["own_best_rule"]["cut"]


def test_the_storm_night_has_too_few_sources_and_the_absent_member_no_folder(demo_nights):
    _, decisions = demo_nights
    storm = decisions[demo.STORM_NIGHT - 1]
    assert storm["route"] == "review"
    assert [r["code"] for r in storm["reasons"] if r["blocking"]] == ["too_few_sources"]
    assert len(storm["sources"]) == len(demo.STORM_DELIVERED) < demo.MIN_VALID_SOURCES
    absent = decisions[demo.ABSENT_NIGHT - 1]["absent"]
    assert {"source_id": demo.ABSENT, "why": "no_folder"} in absent
