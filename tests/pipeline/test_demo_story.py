"""The story box is read off the data: hand-made decisions give known sentences."""

from __future__ import annotations

from decision_support import fitted, source_entry
from truthsieve.pipeline.decision import Absent
from truthsieve.pipeline.report_story import spans, story
from truthsieve.pipeline.routing import Reason

RULE = {"kind": "threshold", "feature": "moisture_pct", "cut": 14.05, "above": 0}
LOOSE = {**RULE, "cut": 15.55}


def night(date, route="aggregate", sources=(), **extra):
    return fitted(RULE, LOOSE, "a", batch_date=date, route=route, sources=list(sources), **extra)


def source(name, flags=(), pull=0.0, gain=0.0, accuracy=0.95):
    return source_entry(name, flags=flags, pull=pull, gain_lower=gain, balanced_accuracy=accuracy, others_rule=RULE)


def test_spans_join_consecutive_nights():
    assert spans(["2026-11-08", "2026-11-07", "2026-11-10"]) == "2026-11-07 to 2026-11-08, 2026-11-10"


def test_story_names_the_puller_the_tempted_the_absent_and_the_review():
    decisions = [
        night("2026-11-01", sources=[source("big", gain=0.07), source("a")]),
        night("2026-11-02", sources=[source("big", ["pulls_fit", "rule_shaped"], pull=0.05), source("a", pull=0.01)]),
        night("2026-11-03", sources=[source("big", ["pulls_fit", "rule_shaped"], pull=0.08), source("a")]),
        night("2026-11-04", "review", [source("a")], absent=[Absent("big", "no_folder")], reasons=[Reason("too_few_sources", "only 1", True)]),
    ]
    lines = story(decisions)
    assert lines[0] == "4 nights from 2026-11-01 to 2026-11-04: 3 aggregated, 1 sent to review."
    pull = next(x for x in lines if x.startswith("big's grades made the difference"))
    assert "on 2 nights (2026-11-02 to 2026-11-03)" in pull and "0.0800" in pull and "on 2026-11-03" in pull
    assert "moisture_pct > 15.55" in pull and "without them moisture_pct > 14.05" in pull
    assert "single cut on 2 nights" in pull and "drew its rule on 0 nights" in pull  # the draws went to "a"
    assert any(x.startswith("On 1 night (2026-11-01) big could have lowered its own error") and "0.0700" in x for x in lines)
    assert "On 2026-11-04 big delivered nothing (absent): 1 valid source(s) that night." in lines
    assert any(x.startswith("2026-11-04 went to review:") and "(too_few_sources)" in x for x in lines)
    assert not any(x.startswith("a's grades") for x in lines)  # no flag, no sentence
