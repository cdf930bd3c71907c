"""Compose the alert messages of a batch: one per source the night concerns, one digest.

A source is concerned when it was flagged, quarantined (its file, row, column and what to
fix) or absent. Every flag sentence gives the value beside its limit and the direction
that trips it, in plain words first and the statistic's name second (see
:mod:`truthsieve.pipeline.evidence`). Each message says where the report is, what happens
next and whom to contact. The platform digest names every file and row at fault.

Pure: returns plain dicts with ``to``, ``subject``, ``body`` (plain text) and ``html`` (the
same content as HTML, every value escaped), plus ``kind`` and ``source_id``. The Airflow
shell sends them; the pipeline writes them to ``alerts.json`` so what was (or would be)
sent is on record.
"""

from __future__ import annotations

import html
from collections.abc import Mapping

from truthsieve.pipeline.config import Config
from truthsieve.pipeline.decision import Decision
from truthsieve.pipeline.evidence import FLAG_NAMES, fix_for, flag_sentence, past_rates
from truthsieve.pipeline.records import ErrorRecord
from truthsieve.pipeline.report_html import rule_text

CAUTION = (
    "Flags are evidence for a person to weigh, not a verdict on a source: an honest grader who "
    "sees different lots than the others can be flagged. Intake decisions remain subject to "
    "local grading standards and licensed graders."
)


def _render(blocks: list) -> tuple[str, str]:
    """Blocks (a string is a paragraph, a list is a bullet list) as plain text and HTML."""
    text, markup = [], []
    for block in blocks:
        if isinstance(block, list):
            text.append("\n".join(f"- {item}" for item in block))
            markup.append("<ul>" + "".join(f"<li>{html.escape(item)}</li>" for item in block) + "</ul>")
        else:
            text.append(block)
            markup.append(f"<p>{html.escape(block)}</p>")
    return "\n\n".join(text) + "\n", "<html><body>" + "".join(markup) + "</body></html>"


def _next(decision: Decision) -> str:
    drawn = decision.draw.rule if decision.draw else None
    if decision.route == "aggregate":
        return f"What happens next: the night was aggregated; the drawn rule ({rule_text(drawn, decision.classes)}) is in force from tonight. Flags never hold a night back; the cooperative's quality team reads the evidence."
    return "What happens next: the night awaits a reviewer's verdict; until then the rule in force stays" + (f" (the drawn rule, {rule_text(drawn, decision.classes)}, would apply if approved)." if drawn else ".")


def _error_line(x: ErrorRecord) -> str:
    return f"{x.file}, row {x.row if x.row is not None else '(whole file)'}, column {x.column or '(none)'}: {x.message}"


def _footer(decision: Decision, config: Config, report: str) -> list:
    contact = config.alerts.platform_address
    return [
        _next(decision),
        f"The night's report: {report}",
        f"Questions or a correction: write to {contact}." if contact else "Questions or a correction: contact the platform team that runs truthsieve.",
        CAUTION,
    ]


def compose_alerts(decision: Decision, config: Config, history: Mapping | None = None, report: str | None = None) -> list[dict]:
    """Messages for the owners of the sources the night concerns and the platform digest, in a
    fixed order. ``history``: the sources' pooled earlier counts (for the direction of a
    shift); ``report``: where the night's report is (default: its path in the output folder)."""
    registry, policy, date = config.registry, config.routing, decision.batch_date
    report = report or f"batch_date={date}/report.html in the truthsieve output folder"
    messages = []
    concerned: dict[str, list] = {}
    for source in decision.sources:
        if source.flags:
            sentences = [f"{FLAG_NAMES[c]} ({c}): {flag_sentence(c, source, policy, past_rates(history, source.source_id))}." for c in source.flags]
            concerned[source.source_id] = [
                f"Night {date}: the grades from {source.source_id} show {len(sentences)} pattern(s) worth a look. They were used tonight like every member's.",
                sentences,
            ]
    errors = decision.errors
    for q in decision.quarantined:
        if q.source_id is None:
            continue
        mine = [x for x in errors if f"source_id={q.source_id}/" in x.file]
        problems = [f"{_error_line(x)} [{x.code}]. To fix: {fix_for(x.code)}." for x in mine]
        concerned[q.source_id] = [
            f"Night {date}: the delivery from {q.source_id} broke the input rules and was quarantined: it was left out tonight (treated as absent). "
            "A corrected delivery for this night is screened again and goes to review.",
            problems or [f"{path}: see the report" for path in q.files],
        ]
    for a in decision.absent:
        if a.why == "no_folder":
            concerned[a.source_id] = [
                f"Night {date}: no grades from {a.source_id} arrived (no source_id={a.source_id}/ folder), so the night was decided without them. "
                "A late delivery is screened again and goes to review."
            ]
    for source_id in sorted(concerned):
        owner = registry[source_id].owner if source_id in registry else None
        if not owner:
            continue
        body, markup = _render([*concerned[source_id], *_footer(decision, config, report)])
        what = ", ".join(f"{FLAG_NAMES[c]} ({c})" for s in decision.sources if s.source_id == source_id for c in s.flags)
        kind = what or ("quarantined" if any(q.source_id == source_id for q in decision.quarantined) else "absent")
        messages.append(
            {"kind": "source", "source_id": source_id, "to": [owner], "subject": f"[truthsieve] {date}: {source_id}: {kind}", "body": body, "html": markup}
        )
    platform = config.alerts.platform_address
    if platform and (concerned or decision.route == "review" or errors):
        blocks = [f"Night {date} was routed to {decision.route}.", "Reasons:"]
        blocks.append([f"[{r.code}] {r.message}" + (" (sends to review)" if r.blocking else "") for r in decision.reasons] or ["none"])
        if errors:
            blocks += ["Every file and row at fault:", [f"{_error_line(x)} [{x.code}; former {x.rule}]" for x in errors]]
        if concerned:
            blocks += ["Sources alerted:", [f"{s}: {concerned[s][0]}" for s in sorted(concerned)]]
        blocks += [f"The night's report: {report}", _next(decision), CAUTION]
        body, markup = _render(blocks)
        messages.append(
            {
                "kind": "digest", "source_id": None, "to": [platform],
                "subject": f"[truthsieve] {date}: {decision.route}, {len(concerned)} source(s) concerned, {len(errors)} input error(s)",
                "body": body, "html": markup,
            }
        )
    return messages
