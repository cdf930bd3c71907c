""""What happened in these nights": sentences generated from the decisions and the ledger.

Pure and generic: nothing here knows the demo; every sentence is read off the data
(flags, pulls, gains, quarantines, absences, review reasons, verdicts).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping, Sequence

from truthsieve.pipeline.decision import Decision
from truthsieve.pipeline.report_html import rule_text


def spans(dates: Sequence[str]) -> str:
    """``2026-11-07, 2026-11-08, 2026-11-10`` -> ``2026-11-07 to 2026-11-08, 2026-11-10``."""
    days = sorted(dt.date.fromisoformat(d) for d in dates)
    runs: list[list[dt.date]] = []
    for day in days:
        if runs and (day - runs[-1][-1]).days == 1:
            runs[-1].append(day)
        else:
            runs.append([day])
    return ", ".join(r[0].isoformat() if len(r) == 1 else f"{r[0].isoformat()} to {r[-1].isoformat()}" for r in runs)


def _nights(n: int) -> str:
    return f"{n} night" + ("" if n == 1 else "s")


def story(decisions: Sequence[Decision], ledger_entries: Sequence[Mapping] = ()) -> list[str]:
    """The sentences of the story, in order: the nights, who pulled the fit, temptations,
    unreliable graders, broken files, absences, reviews and verdicts, the rule in force."""
    from truthsieve.pipeline.ledger import derive, nights
    from truthsieve.pipeline.routing import REASON_CODES

    decisions = sorted(decisions, key=lambda d: d.batch_date)
    if not decisions:
        return ["No night has been screened yet."]
    routes = [d.route for d in decisions]
    lines = [
        f"{_nights(len(decisions))} from {decisions[0].batch_date} to {decisions[-1].batch_date}: "
        f"{routes.count('aggregate')} aggregated, {routes.count('review')} sent to review."
    ]
    sources = sorted({s.source_id for d in decisions for s in d.sources})
    for source in sources:
        rows = [(d, s) for d in decisions for s in d.sources if s.source_id == source]
        pulled = [(d, s) for d, s in rows if "pulls_fit" in s.flags]
        if pulled:
            d, s = max(pulled, key=lambda ds: ds[1].pull)
            drawn = [x for x, _ in pulled if x.draw is not None and x.draw.source_id == source]
            shaped = [x.batch_date for x, y in pulled if "rule_shaped" in y.flags]
            lines.append(
                f"{source}'s grades made the difference to the plain ERM fit on {_nights(len(pulled))} ({spans([x.batch_date for x, _ in pulled])}): "
                f"on {d.batch_date}, with them plain ERM would publish {rule_text(d.consensus.rule, d.classes)}, without them {rule_text(s.others_rule, d.classes)}; "
                f"its pull there (the error its grades add for the other members) was {s.pull:.4f}, its largest."
                + (f" Its grades matched a single cut on {_nights(len(shaped))} of them." if shaped else "")
                + f" The lottery drew its rule on {_nights(len(drawn))} of them: its chance of being drawn follows its registry weight, not its grades."
            )
        tempted = [(d, s) for d, s in rows if s.gain_lower > 0]
        if tempted:
            d, s = max(tempted, key=lambda ds: ds[1].gain_lower)
            lines.append(
                f"On {_nights(len(tempted))} ({spans([x.batch_date for x, _ in tempted])}) {source} could have lowered its own error under plain ERM "
                f"by grading differently (gain under ERM up to {s.gain_lower:.4f}, on {d.batch_date}): the temptation the lottery removes."
            )
        unreliable = [(d, s) for d, s in rows if "low_reliability" in s.flags and "rule_shaped" not in s.flags]
        if len(unreliable) >= 2:
            worst = min(s.balanced_accuracy for _, s in unreliable)
            lines.append(
                f"{source}'s grades looked unreliable on {_nights(len(unreliable))} ({spans([d.batch_date for d, _ in unreliable])}): "
                f"balanced accuracy down to {worst:.3f}, with little pull: noise rather than a push in one direction."
            )
    for d in decisions:
        for q in d.quarantined:
            mine = [x for x in d.errors if q.source_id is None or f"source_id={q.source_id}/" in x.file]
            first = mine[0] if mine else None
            where = f"; first: {first.code} in {first.file}, row {first.row or '-'}" if first else ""
            lines.append(f"On {d.batch_date} {q.source_id or 'the items table'}'s delivery was quarantined ({len(mine)} problem(s){where}).")
        gone = [a.source_id for a in d.absent if a.why == "no_folder"]
        if gone:
            lines.append(f"On {d.batch_date} {', '.join(gone)} delivered nothing (absent): {len(d.sources)} valid source(s) that night.")
    state = nights(ledger_entries)
    for d in decisions:
        if d.route != "review":
            continue
        codes = sorted({r.code for r in d.reasons if r.blocking})
        why = "; ".join(f"{REASON_CODES.get(c, c)} ({c})" for c in codes)
        night = state.get(d.batch_date)
        verdict = ""
        if night is not None and night.decided_by:
            by = night.decided_by
            verdict = f" {by['by']} {'approved' if by.get('decision') == 'approve' else 'rejected'} it" + (f": \u201c{by['note']}\u201d." if by.get("note") else ".")
        elif night is not None:
            verdict = " It awaits a verdict."
        revision = ""
        if d.draw_revision:
            before = {x["path"] for draw in d.earlier_draws for x in draw.get("inputs", [])}  # earlier draws keep their JSON form
            added = sorted({x.source_id for x in d.inputs if x.path not in before and x.source_id})
            late = f" after {', '.join(added)} delivered late" if added else " after its inputs changed"
            revision = f" (screened again{late}: draw revision {d.draw_revision})"
        lines.append(f"{d.batch_date}{revision} went to review: {why}.{verdict}")
    now = derive(ledger_entries)
    if now["rule"] is not None:
        lines.append(f"Rule in force now: {rule_text(now['rule'], decisions[-1].classes)}, since {now['since']}.")
    return lines
