"""The pages' shared parts: escaping, numbers, tables, chips, the palette and the style sheet.

The palette is truthsieve's own. Its two signal colours (``calm`` for what went through,
``heed`` for what needs a look) differ in hue for readers with normal vision and in
luminance for everyone else: under a simulated deuteranopia and printed in grey they stay
apart (``tests/pipeline/test_palette.py`` checks both). Every badge and chip also carries
its word and a border, so nothing depends on colour or on printed backgrounds.
"""

from __future__ import annotations

import html
from collections.abc import Mapping, Sequence

PALETTE = {
    "ink": "#1b2330",  # text
    "paper": "#fdfcf8",  # page
    "panel": "#ffffff",  # tables, charts
    "line": "#c9ced6",  # rules and borders
    "calm": "#174a7c",  # aggregated, unflagged: a deep blue
    "calm_wash": "#e4eef8",
    "heed": "#f0a030",  # review, flagged: an amber, much lighter than the blue
    "heed_wash": "#fbeed9",
    "heed_ink": "#8a4b00",  # amber text dark enough to read on paper
    "faint": "#7a828e",  # absent, no data
    "cut": "#6a3d9a",  # the drawn cut on the feature plot
}

CAUTION = (
    "The fitted rule may drive safety-relevant decisions such as grain intake and storage "
    "(spoilage, mycotoxins, heating in bins). It is not a grading standard. Flags are evidence "
    "for a person to weigh, not a verdict on a source. Local grading standards, codes and "
    "licensed graders prevail."
)

P = PALETTE
STYLE = f"""
body{{font:15px/1.5 'DejaVu Sans',Verdana,sans-serif;color:{P['ink']};background:{P['paper']};margin:0}}
main{{max-width:1100px;margin:0 auto;padding:14px 24px 40px}}
nav{{font-size:13px;margin-bottom:4px}}a{{color:{P['calm']}}}
h1{{font-size:23px;margin:4px 0 6px}}
h2{{font-size:17px;border-bottom:2px solid {P['calm']};padding-bottom:2px;margin:26px 0 8px}}
h3{{font-size:15px;margin:14px 0 4px}}
.scroll{{overflow-x:auto;max-width:100%}}
table{{border-collapse:collapse;font:13px/1.35 'DejaVu Sans Mono',monospace;background:{P['panel']};margin:4px 0}}
th,td{{border:1px solid {P['line']};padding:3px 6px;text-align:right;vertical-align:top}}
th{{background:{P['calm_wash']};text-align:center;font-weight:bold}}td.t{{text-align:left}}
.nowrap,td.date{{white-space:nowrap}}
.route{{display:inline-block;padding:1px 8px;border:2px solid;border-radius:3px;font-weight:bold;white-space:nowrap}}
.route.aggregate{{color:{P['calm']};background:{P['calm_wash']}}}
.route.review{{color:{P['heed_ink']};background:{P['heed_wash']};border-style:double;border-width:3px}}
.chip{{display:inline-block;border:1px solid {P['heed_ink']};color:{P['heed_ink']};background:{P['heed_wash']};border-radius:2px;padding:0 4px;margin:1px;white-space:nowrap}}
.chip.calm{{border-color:{P['calm']};color:{P['calm']};background:{P['calm_wash']}}}
.chip.faint{{border-color:{P['faint']};color:{P['ink']};background:{P['panel']};border-style:dashed}}
.summary{{border:2px solid {P['calm']};background:{P['panel']};padding:8px 14px;margin:8px 0 12px}}
.summary.review{{border-color:{P['heed_ink']};border-style:double;border-width:4px}}
.summary p{{margin:5px 0}}
.caution{{border-left:5px solid {P['heed']};background:{P['heed_wash']};padding:6px 12px;margin:12px 0;font-size:13px}}
code{{font-family:'DejaVu Sans Mono',monospace;font-size:12.5px;overflow-wrap:anywhere}}
.pair{{display:flex;gap:18px;flex-wrap:wrap}}.pair>div{{flex:1 1 340px;min-width:0}}
figure{{margin:6px 0}}figcaption{{font-size:13px;max-width:640px}}
svg text{{font-family:'DejaVu Sans',sans-serif}}
section{{break-inside:auto}}
@media print{{
 body{{background:#fff;font-size:12px}}main{{max-width:none;padding:0}}nav{{display:none}}
 section.page{{break-before:page}}
 h2,h3{{break-after:avoid}}h2+*,h3+*{{break-before:avoid}}
 table,figure,.summary{{break-inside:avoid}}
 .route,.chip{{background:#fff !important}}
 .scroll{{overflow:visible}}
}}
"""


def e(value) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def f(value, digits: int = 4) -> str:
    return "n/a" if value is None else f"{value:.{digits}f}"


def class_text(index: int, classes: Sequence[str] | None = None) -> str:
    """A class in words: its configured name; unnamed, 0/1 read as reject/accept (the binary default)."""
    if classes is not None:
        return f"{classes[index]} ({index})"
    return {0: "reject", 1: "accept"}.get(int(index), f"class {index}")


def rule_text(rule: Mapping | None, classes: Sequence[str] | None = None) -> str:
    """One rule in words; ``classes`` are the decision's class names (``Decision.classes``)."""
    if not rule:
        return "none"
    if rule["kind"] == "constant":
        if classes is None and rule["label"] in (0, 1):
            return "accept every lot" if rule["label"] else "reject every lot"
        return f"{class_text(rule['label'], classes)} for every lot"
    if rule["kind"] == "threshold":
        above = rule["above"]
        below = rule.get("below", 1 - above)  # decisions written before K classes have no below
        return f"{rule['feature']} > {rule['cut']:g}: {class_text(above, classes)}; otherwise {class_text(below, classes)}"
    return f"listed rule {rule['name']}"


def page(title: str, body: str) -> str:
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        "<meta name='viewport' content='width=device-width,initial-scale=1'>"
        f"<title>{e(title)}</title><style>{STYLE}</style></head><body><main>{body}</main></body></html>\n"
    )


def table(headers: Sequence[str], rows: Sequence[Sequence[str]], text_columns: Sequence[int] = (0,), nowrap: Sequence[int] = ()) -> str:
    """A table inside a horizontally scrolling box: at any width it wraps or scrolls, never clips."""
    head = "".join(f"<th>{e(h)}</th>" for h in headers)

    def opening(k):
        classes = " ".join(name for name, on in (("t", k in text_columns), ("nowrap", k in nowrap)) if on)
        return f"<td class='{classes}'>" if classes else "<td>"

    rows = list(rows)
    openings = [opening(k) for k in range(max((len(row) for row in rows), default=0))]  # each column's tag, once
    body = "".join("<tr>" + "".join([f"{o}{c}</td>" for o, c in zip(openings, row)]) + "</tr>" for row in rows)
    return f"<div class='scroll'><table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table></div>"


def chip(text: str, kind: str = "", title: str = "") -> str:
    tip = f" title='{e(title)}'" if title else ""
    return f"<span class='chip {e(kind)}'{tip}>{e(text)}</span>"


def route_badge(route: str) -> str:
    return f"<span class='route {e(route)}'>{e(route)}</span>"
