"""``pipeline/report_index.py`` on its own: the totals per source, the pull and flag cells, and
the index page's tables, from hand-made typed decisions (``tests/decision_support.py``)."""

from __future__ import annotations

import re

from decision_support import fitted, source_entry, typed_decision
from truthsieve.pipeline.decision import Absent, Quarantined
from truthsieve.pipeline.report_index import _flags_cell, render_index, top_pull, totals
from truthsieve.pipeline.routing import Reason


def three_nights():
    """Three fitted nights (a night with sources has a consensus; the story reads it)."""
    first = fitted(
        batch_date="2026-11-01",
        sources=[source_entry("a"), source_entry("b", flags=["pulls_fit"])],
        reasons=[Reason("pulls_fit", "b pulled the fit", True, "b"), Reason("far_from_consensus", "advisory", False, "a")],
        absent=[Absent("c", "no_folder")],
    )
    second = fitted(
        batch_date="2026-11-02",
        sources=[source_entry("a", flags=["low_reliability"])],
        quarantined=[
            Quarantined("b", ("batch_date=2026-11-02/source_id=b/labels.parquet",)),
            Quarantined("a2", ("batch_date=2026-11-02/source_id=a2/labels.parquet",)),
            Quarantined(None, ("items.parquet",)),
        ],
        absent=[Absent("b", "quarantined"), Absent("c", "no_folder")],
    )
    third = fitted(
        batch_date="2026-11-03",
        sources=[source_entry("a"), source_entry("b"), source_entry("c")],
        reasons=[Reason("too_few_sources", "no source named", True), Reason("x", "one", True, "c"), Reason("y", "two", True, "c")],
        quarantined=[Quarantined("a2", ("batch_date=2026-11-03/source_id=a2/labels.parquet",))],
    )
    return [first, second, third]


# Worked by hand from three_nights():
#   a: valid on all 3 nights; flagged only on 11-02 (low_reliability); its one reason (11-01) is not blocking -> review 0
#   b: valid on 11-01 and 11-03; flagged on 11-01 (pulls_fit); quarantined on 11-02, where absent says "quarantined",
#      which is not counted as absent; named by a blocking reason on 11-01 -> review 1
#   c: valid on 11-03 only; absent (no folder) on 11-01 and 11-02; two blocking reasons on 11-03 -> one night, review 1
#   a2: only quarantined, on 11-02 and 11-03 (first met last, listed second: rows go in source-id order).
#   The items table's quarantine (no source id) and the reason naming no source add no row.
HAND_TOTALS = [
    {"source_id": "a", "valid": 3, "flagged": 1, "quarantined": 0, "absent": 0, "review": 0},
    {"source_id": "a2", "valid": 0, "flagged": 0, "quarantined": 2, "absent": 0, "review": 0},
    {"source_id": "b", "valid": 2, "flagged": 1, "quarantined": 1, "absent": 0, "review": 1},
    {"source_id": "c", "valid": 1, "flagged": 0, "quarantined": 0, "absent": 2, "review": 1},
]


def test_totals_per_source_are_the_hand_counts():
    assert totals(three_nights()) == HAND_TOTALS


def test_totals_do_not_depend_on_the_order_of_the_nights():
    assert totals(list(reversed(three_nights()))) == HAND_TOTALS


def test_a_source_listed_twice_in_a_night_counts_once_by_its_first_entry():
    night = fitted(sources=[source_entry("a"), source_entry("a", flags=["pulls_fit"])])
    assert totals([night]) == [{"source_id": "a", "valid": 1, "flagged": 0, "quarantined": 0, "absent": 0, "review": 0}]


def test_no_night_no_totals():
    assert totals([]) == []


def test_top_pull_names_the_largest_flagged_pull_only():
    decision = typed_decision(sources=[
        source_entry("a", pull=0.9),  # largest pull, but not flagged: not named
        source_entry("b", pull=0.3, flags=["pulls_fit"]),
        source_entry("c", pull=0.5, flags=["pulls_fit", "low_reliability"]),
    ])
    assert top_pull(decision) == "c <span class='pull nowrap'>0.5000</span>"
    assert top_pull(typed_decision(sources=[source_entry("a", pull=0.9)])) == "&ndash;"


def test_the_flags_cell_lists_flags_in_words_then_quarantined_then_absent():
    decision = typed_decision(
        sources=[source_entry("a", flags=["pulls_fit", "new_code"]), source_entry("b")],
        quarantined=[Quarantined(None, ("items.parquet",))],
        absent=[Absent("c", "no_folder"), Absent("d", "quarantined")],
    )
    assert _flags_cell(decision).split("<br>") == [
        # FLAG_NAMES["pulls_fit"] is "pull high"; a code without words shows as itself
        "a: <span class='chip ' title='pulls_fit'>pull high</span><span class='chip ' title='new_code'>new_code</span>",
        "items table: <span class='chip faint'>quarantined</span>",
        "c: <span class='chip faint'>absent</span>",  # d's absence is its quarantine: not said twice
    ]
    assert _flags_cell(typed_decision(sources=[source_entry("a")])) == "&ndash;"


def _section(page: str, heading_id: str) -> str:
    start = page.index(f"<h2 id='{heading_id}'>")
    end = page.find("<h2 ", start + 1)
    return page[start:] if end < 0 else page[start:end]


def test_the_index_page_carries_the_totals_and_the_nights_in_date_order():
    nights = three_nights()
    page = render_index([nights[2], nights[0], nights[1]])
    rows = re.findall(r"<tr>(.*?)</tr>", _section(page, "totals"))
    cells = [re.findall(r"<td[^>]*>(.*?)</td>", row) for row in rows if "<td" in row]
    assert cells == [[t["source_id"], *(str(t[k]) for k in ("valid", "flagged", "quarantined", "absent", "review"))] for t in HAND_TOTALS]
    links = re.findall(r"<a href='batch_date=([0-9-]+)/report.html'>", _section(page, "nights"))
    assert links == ["2026-11-01", "2026-11-02", "2026-11-03"]
    assert "Rule in force now: <strong>none</strong>" in page  # no ledger: nothing aggregated or approved


def test_the_index_page_names_the_nights_it_could_not_read():
    page = render_index([fitted(batch_date="2026-11-01")], unreadable={"2026-11-04": "not JSON", "2026-11-02": "no batch_date"})
    assert re.findall(r"<p class='unreadable'><strong>Not listed: ([0-9-]+)</strong>, its decision.json could not be read \((.*?)\)", page) == [
        ("2026-11-02", "no batch_date"), ("2026-11-04", "not JSON"),
    ]
