"""The history strip's earlier nights (pipeline/report_history.py), read back from real
published decision.json files through decision_from_json."""

from __future__ import annotations

from decision_support import source_entry, typed_decision
from truthsieve.pipeline.decision import Absent, Quarantined, decision_json
from truthsieve.pipeline.outputs import dumps_decision
from truthsieve.pipeline.report_history import night_brief, recent_nights


def publish(out, decision):
    folder = out / f"batch_date={decision.batch_date}"
    folder.mkdir(parents=True)
    (folder / "decision.json").write_bytes(dumps_decision(decision_json(decision)))
    return folder


def test_the_brief_holds_route_flags_quarantine_and_absence():
    decision = typed_decision(
        batch_date="2026-11-10", route="review", sources=[source_entry("a", flags=["pulls_fit"]), source_entry("c")],
        quarantined=[Quarantined("b", ("x.parquet",)), Quarantined(None, ("items.parquet",))],
        absent=[Absent("d", "no_folder"), Absent("b", "quarantined")],
    )
    # the items table's quarantine names no source; b is shown quarantined, not also absent
    assert night_brief(decision) == {
        "batch_date": "2026-11-10", "route": "review", "flags": {"a": ["pulls_fit"], "c": []}, "quarantined": ["b"], "absent": ["d"],
    }


def test_the_latest_nights_before_tonight_oldest_first_skipping_unreadable_ones(tmp_path):
    for day in range(1, 11):
        publish(tmp_path, typed_decision(batch_date=f"2026-11-{day:02d}", route="aggregate" if day % 2 else "review"))
    (tmp_path / "batch_date=2026-11-09" / "decision.json").write_text("{broken")  # unreadable
    (tmp_path / "batch_date=2026-11-08" / "decision.json").write_text('{"batch_date": "2026-11-08"}')  # lacks what a decision holds
    (tmp_path / "batch_date=2026-11-11").mkdir()  # nothing published yet
    for day in (12, 13):
        publish(tmp_path, typed_decision(batch_date=f"2026-11-{day}"))
    # published before the 12th: the 1st to the 10th; the latest 7 are the 4th to the 10th, less the 8th and 9th
    briefs = recent_nights(tmp_path, "2026-11-12")
    assert [(b["batch_date"], b["route"]) for b in briefs] == [
        ("2026-11-04", "review"), ("2026-11-05", "aggregate"), ("2026-11-06", "review"), ("2026-11-07", "aggregate"), ("2026-11-10", "review"),
    ]
    assert [b["batch_date"] for b in recent_nights(tmp_path, "2026-11-04", count=2)] == ["2026-11-02", "2026-11-03"]
    assert recent_nights(tmp_path, "2026-11-01") == []
