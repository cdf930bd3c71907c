"""``pipeline/report_ledger.py`` on its own: the report's rule-in-force section and the index's
verdict cell, from hand-made decisions and ledger nights. Rules in words follow
``report_html.rule_text``: class 0 is "reject" and 1 "accept" when no class names are configured."""

from __future__ import annotations

import html
import re

from decision_support import RULE, fitted, typed_decision
from truthsieve.pipeline.ledger import Night
from truthsieve.pipeline.report_ledger import in_force_section, verdict_cell

DRAWN = "moisture_pct > 14.05: reject; otherwise accept"  # RULE: cut 14.05, above 0, below 1
EVERY_LOT = {"kind": "constant", "label": 1}  # "accept every lot"
NONE_YET = "none (no night aggregated or approved yet)"


def rows(section: str) -> dict[str, str]:
    cells = [html.unescape(c) for c in re.findall(r"<td[^>]*>(.*?)</td>", section)]
    return dict(zip(cells[0::2], cells[1::2]))


def test_an_aggregated_night_puts_its_drawn_rule_in_force():
    section = in_force_section(fitted(route="aggregate"), {"rule": EVERY_LOT, "since": "2026-11-01"})
    assert rows(section) == {"before this night": "accept every lot (since 2026-11-01)", "after this night": DRAWN}
    assert "id='decide'" not in section  # nothing for a reviewer to decide


def test_a_review_night_keeps_the_rule_in_force_and_says_what_a_verdict_does():
    section = in_force_section(fitted(route="review", batch_date="2026-11-05"), {"rule": None, "since": None})
    assert rows(section) == {"before this night": NONE_YET, "after this night": f"unchanged until a verdict: {NONE_YET}"}
    decide = html.unescape(re.search(r"<p id='decide'>(.*?)</p>", section).group(1))
    assert f"approve: the drawn rule ({DRAWN}), which would apply if approved, goes in force; reject: the rule in force stays." in decide
    assert "truthsieve verdict --out OUT --date 2026-11-05 (--approve | --reject) --by NAME --note TEXT" in decide


def test_a_review_night_without_a_draw_cannot_be_approved_into_force():
    section = in_force_section(typed_decision(route="review"), {"rule": EVERY_LOT, "since": "2026-11-01"})
    assert rows(section)["after this night"] == "unchanged until a verdict: accept every lot (since 2026-11-01)"
    assert "approve: not possible, no rule was drawn" in section


def test_an_unknown_rule_in_force_points_at_in_force_json():
    section = in_force_section(fitted(route="aggregate"), None)
    assert rows(section)["before this night"] == "not known to this report: see in_force.json"


def test_configured_class_names_are_used():
    grades = ("reject", "feed", "milling", "premium")
    rule = {"kind": "threshold", "feature": "protein_pct", "cut": 12.5, "above": 3, "below": 1}
    section = in_force_section(fitted(rule=rule, route="aggregate", classes=grades), {"rule": {"kind": "constant", "label": 2}, "since": "2026-11-01"})
    assert rows(section) == {
        "before this night": "milling (2) for every lot (since 2026-11-01)",
        "after this night": "protein_pct > 12.5: premium (3); otherwise feed (1)",
    }


def _night(status: str, decided_by: dict | None = None) -> Night:
    return Night("2026-11-03", status, "review", RULE, "0" * 64, 1, decided_by)


def test_the_verdict_cell():
    assert verdict_cell(None) == "&ndash;"  # a night the ledger does not know
    assert verdict_cell(_night("awaiting_review")) == "awaiting review"
    assert verdict_cell(_night("approved", {"by": "ana"})) == "approved by ana"
    assert verdict_cell(_night("rejected", {"by": "O'Neil <qa>"})) == "rejected by O&#x27;Neil &lt;qa&gt;"  # escaped for HTML
