"""``pipeline/report_story.py``: the sentences ``test_demo_story.py`` does not reach (broken
deliveries, unreliable graders, verdicts from the ledger, draw revisions, the rule in force),
from hand-made decisions and hand-written ledger lines. Each expected sentence is the module's
template filled in by hand; the reasons' words are ``routing.REASON_CODES``'."""

from __future__ import annotations

from decision_support import RULE, fitted, source_entry, typed_decision
from truthsieve.pipeline.decision import InputRecord, Quarantined
from truthsieve.pipeline.records import ErrorRecord
from truthsieve.pipeline.report_story import story
from truthsieve.pipeline.routing import REASON_CODES, Reason

EVERY_LOT = {"kind": "constant", "label": 1}  # "accept every lot"
C_FILE = "batch_date=2026-11-01/source_id=c/labels.parquet"
D_FILE = "batch_date=2026-11-01/source_id=d/labels.parquet"
LATE = "batch_date=2026-11-04/source_id=e/labels.parquet"
EARLY = "batch_date=2026-11-04/source_id=a/labels.parquet"


def nights():
    unreliable = dict(flags=["low_reliability"])
    first = fitted(
        batch_date="2026-11-01", route="aggregate",
        sources=[source_entry("a", balanced_accuracy=0.612, **unreliable), source_entry("b", flags=["low_reliability", "rule_shaped"])],
        quarantined=[Quarantined("c", (C_FILE,))],
        errors=[
            ErrorRecord(C_FILE, 4, "label", "null_label", "label is null"),
            ErrorRecord(D_FILE, 2, "label", "null_label", "label is null"),  # another source's: not c's
            ErrorRecord(C_FILE, None, "label", "wrong_type", "label must be bool or integer 0/1, not double"),
        ],
    )
    second = fitted(
        batch_date="2026-11-02", route="review", rule=EVERY_LOT,
        sources=[source_entry("a", balanced_accuracy=0.55, **unreliable), source_entry("b", flags=["low_reliability", "rule_shaped"])],
        reasons=[Reason("too_few_sources", "only 2", True), Reason("source_noted", "advisory", False)],
    )
    fourth = fitted(
        batch_date="2026-11-04", route="review", sources=[source_entry("a")],
        reasons=[Reason("ratio_above_bound", "", True), Reason("draw_revised", "", True)],
        draw_revision=1,
        earlier_draws=[{"inputs": [{"path": EARLY}]}],
        inputs=[InputRecord(EARLY, "0" * 64, 3, True, "a"), InputRecord(LATE, "1" * 64, 3, True, "e")],
    )
    fifth = fitted(batch_date="2026-11-05", route="review", sources=[source_entry("a")], reasons=[Reason("too_few_sources", "", True)])
    return [fifth, second, first, fourth]  # any order: the story sorts by date


def published(date: str, route: str, rule: dict, seq: int) -> dict:
    return {"event": "night_published", "date": date, "route": route, "rule": rule, "decision_sha256": date * 2, "seq": seq}


def verdict(date: str, decision: str, by: str, note: str | None, seq: int) -> dict:
    return {"event": "verdict", "date": date, "decision": decision, "by": by, "note": note, "decision_sha256": date * 2, "seq": seq, "at": "2026-11-06T08:00:00Z"}


LEDGER = [
    published("2026-11-01", "aggregate", RULE, 1),
    published("2026-11-02", "review", EVERY_LOT, 2),
    verdict("2026-11-02", "approve", "ana", "checked by hand", 3),
    published("2026-11-04", "review", RULE, 4),
    published("2026-11-05", "review", RULE, 5),
    verdict("2026-11-05", "reject", "bo", None, 6),
]


def test_the_story_of_four_nights_and_their_verdicts():
    lines = story(nights(), LEDGER)
    assert lines == [
        "4 nights from 2026-11-01 to 2026-11-05: 1 aggregated, 3 sent to review.",
        # a: low_reliability on 11-01 and 11-02; the worst balanced accuracy, 0.55, to 3 places.
        # b's two flagged nights are rule_shaped too: a push, not noise, so no sentence.
        "a's grades looked unreliable on 2 nights (2026-11-01 to 2026-11-02): balanced accuracy down to 0.550, "
        "with little pull: noise rather than a push in one direction.",
        # c's two records (rows 4 and none), not d's; the first names its code (null_label is grade_blank)
        f"On 2026-11-01 c's delivery was quarantined (2 problem(s); first: grade_blank in {C_FILE}, row 4).",
        # blocking codes only (source_noted is advisory); the verdict's note in curly quotes
        f"2026-11-02 went to review: {REASON_CODES['too_few_sources']} (too_few_sources). ana approved it: \u201cchecked by hand\u201d.",
        # codes sorted; e's file is not among the earlier draw's inputs: it came late
        "2026-11-04 (screened again after e delivered late: draw revision 1) went to review: "
        f"{REASON_CODES['draw_revised']} (draw_revised); {REASON_CODES['ratio_above_bound']} (ratio_above_bound). It awaits a verdict.",
        f"2026-11-05 went to review: {REASON_CODES['too_few_sources']} (too_few_sources). bo rejected it.",
        # the approval of 11-02 is the latest night putting a rule in force; 11-05's rejection keeps it
        "Rule in force now: accept every lot, since 2026-11-02.",
    ]


def test_one_unreliable_night_is_not_a_pattern():
    lines = story([fitted(sources=[source_entry("a", flags=["low_reliability"], balanced_accuracy=0.5)])])
    assert not any("unreliable" in line for line in lines)


def test_an_items_table_quarantine_counts_every_record_of_the_night():
    night = typed_decision(
        quarantined=[Quarantined(None, ("batch_date=2026-11-03/items.parquet",))],
        errors=[ErrorRecord("batch_date=2026-11-03/items.parquet", None, "item_id", "wrong_type", "item_id must be a string")],
    )
    assert "On 2026-11-03 the items table's delivery was quarantined (1 problem(s); first: " in story([night])[1]
    assert story([night])[1].endswith("in batch_date=2026-11-03/items.parquet, row -).")  # no row: a dash


def test_a_revision_names_who_sent_files_the_earlier_draw_did_not_read_else_says_inputs_changed():
    night = fitted(
        route="review", reasons=[Reason("draw_revised", "", True)], draw_revision=2,
        earlier_draws=[{"inputs": [{"path": EARLY}]}], inputs=[InputRecord(EARLY.replace("a/labels", "a/fixed"), "0" * 64, 3, True, "a")],
    )
    assert "(screened again after a delivered late: draw revision 2)" in story([night])[-1]
    same = fitted(route="review", reasons=[Reason("draw_revised", "", True)], draw_revision=2,
                  earlier_draws=[{"inputs": [{"path": EARLY}]}], inputs=[InputRecord(EARLY, "0" * 64, 3, True, "a")])
    assert "(screened again after its inputs changed: draw revision 2)" in story([same])[-1]


def test_no_night_yet():
    assert story([]) == ["No night has been screened yet."]
