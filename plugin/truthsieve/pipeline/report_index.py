"""``index.html``: the rule in force, the story of the nights, one row per night, totals per source.

Readable at 800 px: tables sit in horizontally scrolling boxes and their cells wrap (dates
do not), so nothing is clipped.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from truthsieve.pipeline.decision import Decision
from truthsieve.pipeline.evidence import FLAG_NAMES
from truthsieve.pipeline.report_html import CAUTION, chip, e, f, page, route_badge, rule_text, table


def top_pull(decision: Decision) -> str:
    """The source that pulled the fit beyond the limit (flag ``pulls_fit``) with its pull, or a dash."""
    pulled = [s for s in decision.sources if "pulls_fit" in s.flags]
    if not pulled:
        return "&ndash;"
    s = max(pulled, key=lambda x: x.pull)
    return f"{e(s.source_id)} <span class='pull nowrap'>{f(s.pull)}</span>"


def _flags_cell(decision: Decision) -> str:
    lines = []
    for s in decision.sources:
        if s.flags:
            lines.append(f"{e(s.source_id)}: " + "".join(chip(FLAG_NAMES.get(c, c), title=c) for c in s.flags))
    for q in decision.quarantined:
        lines.append(f"{e(q.source_id or 'items table')}: {chip('quarantined', 'faint')}")
    for a in decision.absent:
        if a.why == "no_folder":
            lines.append(f"{e(a.source_id)}: {chip('absent', 'faint')}")
    return "<br>".join(lines) or "&ndash;"


def totals(decisions: Sequence[Decision]) -> list[dict]:
    """Per source: nights with valid labels, flagged, quarantined, absent, and nights a
    blocking reason named it (it sent the night to review). One pass over each night."""
    rows: dict[str, dict] = {}
    named: list[set[str]] = []  # per night, the sources a blocking reason names
    for d in decisions:
        for name in [s.source_id for s in d.sources] + [q.source_id for q in d.quarantined if q.source_id] + [a.source_id for a in d.absent]:
            rows.setdefault(name, {"source_id": name, "valid": 0, "flagged": 0, "quarantined": 0, "absent": 0, "review": 0})
    for d in decisions:
        seen = set()
        for s in d.sources:
            if s.source_id not in seen:  # the first entry of a source counts, as a lookup would
                seen.add(s.source_id)
                rows[s.source_id]["valid"] += 1
                rows[s.source_id]["flagged"] += bool(s.flags)
        for name in {q.source_id for q in d.quarantined if q.source_id}:
            rows[name]["quarantined"] += 1
        for name in {a.source_id for a in d.absent if a.why == "no_folder"}:
            rows[name]["absent"] += 1
        named.append({r.source_id for r in d.reasons if r.blocking and r.source_id in rows})
    for blocked in named:
        for name in blocked:
            rows[name]["review"] += 1
    return [rows[name] for name in sorted(rows)]


def render_index(decisions: Sequence[Decision], ledger_entries: Sequence[Mapping] = (), unreadable: Mapping[str, str] = {}) -> str:
    """:param unreadable: date -> why, for nights whose ``decision.json`` is not a decision
        (named under the table rather than silently left out)."""
    from truthsieve.pipeline.ledger import derive, nights
    from truthsieve.pipeline.report_ledger import verdict_cell
    from truthsieve.pipeline.report_story import story

    ledger_nights = nights(ledger_entries)
    now = derive(ledger_entries)
    decisions = sorted(decisions, key=lambda d: d.batch_date)
    rows = []
    for d in decisions:
        ratio = d.mechanism.ratio if d.mechanism else None
        date = e(d.batch_date)
        then = derive(ledger_entries, d.batch_date)
        rows.append(
            [
                f"<a href='batch_date={date}/report.html'>{date}</a>", route_badge(d.route), verdict_cell(ledger_nights.get(d.batch_date)),
                e(rule_text(then["rule"], d.classes)), top_pull(d), f(ratio, 3), _flags_cell(d),
            ]
        )
    if now["rule"]:
        how = now["event"] or {}
        by = f", approved by {e(how['by'])}" if how.get("kind") == "verdict" else ""
        in_force = f"Rule in force now: <strong>{e(rule_text(now['rule'], decisions[-1].classes if decisions else None))}</strong> since {e(now['since'])}{by} (ledger line {e(now['seq'])})."
    else:
        in_force = "Rule in force now: <strong>none</strong> (no night aggregated or approved yet)."
    told = "".join(f"<li>{e(line)}</li>" for line in story(decisions, ledger_entries))
    total_rows = [
        [e(t["source_id"]), str(t["valid"]), str(t["flagged"]), str(t["quarantined"]), str(t["absent"]), str(t["review"])] for t in totals(decisions)
    ]
    body = (
        "<h1>Label batches, night by night</h1>"
        f"<div class='summary' id='in-force'><p>{in_force}</p>"
        "<p id='next-step'><strong>Next step.</strong> Nights marked <em>awaiting review</em> need a verdict: "
        "<code>truthsieve verdict --out OUT --date YYYY-MM-DD (--approve | --reject) --by NAME --note TEXT</code>; "
        "label lots with the rule in force: <code>truthsieve apply --out OUT --items ITEMS.parquet --write LABELLED.parquet</code>.</p></div>"
        f"<h2 id='story'>What happened in these {len(decisions)} nights</h2><ul class='story'>{told}</ul>"
        "<h2 id='nights'>Nights</h2>"
        + table(
            ["night", "route", "verdict", "rule in force after", "who pulled the fit", "ratio", "flags, quarantined and absent sources"],
            rows, text_columns=(0, 1, 2, 3, 4, 6), nowrap=(0, 1),
        )
        + "".join(f"<p class='unreadable'><strong>Not listed: {e(date)}</strong>, its decision.json could not be read ({e(why)}).</p>" for date, why in sorted(unreadable.items()))
        + "<p><strong>ratio</strong>: the lottery's expected risk divided by the plain ERM fit's risk, the price paid tonight for a draw no member "
        "can bend (1 means none). <strong>who pulled the fit</strong>: the member whose grades raised the others' error the most by moving the "
        "plain fit, when above the limit, with its pull.</p>"
        "<h2 id='totals'>Totals per source</h2>"
        + table(["source", "nights with valid labels", "nights flagged", "nights quarantined", "nights absent", "nights it sent to review"], total_rows)
        + f"<div class='caution'><strong>Caution.</strong> {e(CAUTION)}</div>"
    )
    return page("truthsieve history", body)
