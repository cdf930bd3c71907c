"""Read the earlier nights a report's history strip shows (I/O here; the renderer stays pure)."""

from __future__ import annotations

import json

from truthsieve.pipeline.decision import Decision, decision_from_json
from truthsieve.pipeline.outputs import as_location, batch_location, published_dates

STRIP_NIGHTS = 7


def night_brief(decision: Decision) -> dict:
    """What the strip needs of one night: route, flags per source, quarantined, absent."""
    return {
        "batch_date": decision.batch_date,
        "route": decision.route,
        "flags": {s.source_id: list(s.flags) for s in decision.sources},
        "quarantined": [q.source_id for q in decision.quarantined if q.source_id],
        "absent": [a.source_id for a in decision.absent if a.why != "quarantined"],
    }


def recent_nights(out, batch_date: str, count: int = STRIP_NIGHTS) -> list[dict]:
    """The ``count`` latest published nights before ``batch_date`` under ``out``, oldest first;
    an unreadable decision is skipped (the strip is a reading aid, not a record)."""
    out = as_location(out)
    dates = [d for d in published_dates(out) if d < batch_date]
    briefs = []
    for date in dates[-count:]:
        path = batch_location(out, date) / "decision.json"
        try:
            briefs.append(night_brief(decision_from_json(json.loads(path.read_text()))))
        except (OSError, ValueError, KeyError, TypeError):
            continue
    return briefs
