"""The ledger's parts of the reports: the rule in force around a night, a night's verdict."""

from __future__ import annotations

from collections.abc import Mapping

from truthsieve.pipeline.decision import Decision
from truthsieve.pipeline.report_html import e as _e
from truthsieve.pipeline.report_html import rule_text
from truthsieve.pipeline.report_html import table as _table


def in_force_section(decision: Decision, before: Mapping | None) -> str:
    """The rule in force before and after the night and, on review, what the reviewer decides."""
    date, drawn, classes = decision.batch_date, decision.draw.rule if decision.draw else None, decision.classes
    previous = (before or {}).get("rule")
    if before is None:
        was = "not known to this report: see in_force.json"
    else:
        was = f"{rule_text(previous, classes)} (since {before['since']})" if previous else "none (no night aggregated or approved yet)"
    after = rule_text(drawn, classes) if decision.route == "aggregate" else f"unchanged until a verdict: {was}"
    parts = [
        "<h2 id='in-force'>Rule in force</h2>",
        _table(["", "rule"], [["before this night", _e(was)], ["after this night", _e(after)]], text_columns=(0, 1)),
    ]
    if decision.route == "review":
        approve = f"approve: the drawn rule ({rule_text(drawn, classes)}), which would apply if approved, goes in force" if drawn else "approve: not possible, no rule was drawn"
        command = f"truthsieve verdict --out OUT --date {date} (--approve | --reject) --by NAME --note TEXT"
        parts.append(
            f"<p id='decide'>The reviewer decides: {_e(approve)}; reject: the rule in force stays. "
            f"Record it with <code>{_e(command)}</code> (OUT is the folder holding index.html). "
            "The verdict goes to <code>ledger.jsonl</code>; the index shows it.</p>"
        )
    return "".join(parts)


def verdict_cell(night) -> str:
    if night is None:
        return "&ndash;"
    by = night.decided_by
    who = f" by {by['by']}" if by else ""
    return f"{_e(night.status.replace('_', ' '))}{_e(who)}"
