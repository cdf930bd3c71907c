"""The reviewer's page of one batch (``report.html``) and the history page (``index.html``).

Self-contained HTML with hand-made inline SVG charts: no scripts, no network fetches.
Every value that comes from input data goes through :func:`html.escape`.
"""

from __future__ import annotations

import html
from collections.abc import Mapping, Sequence

import numpy as np

CAUTION = (
    "The fitted rule may drive safety-relevant decisions such as grain intake and storage "
    "(spoilage, mycotoxins, heating in bins). It is not a grading standard. Flags are evidence "
    "for a person to weigh, not a verdict on a source. Local grading standards, codes and "
    "licensed graders prevail."
)

STYLE = """
body{font:14px/1.45 Georgia,'Times New Roman',serif;color:#1d2a22;background:#f6f4ee;margin:0}
main{max-width:1080px;margin:0 auto;padding:18px 28px 40px}
h1{font-size:24px;margin:6px 0 2px}h2{font-size:17px;border-bottom:2px solid #7a8f5a;padding-bottom:2px;margin-top:26px}
table{border-collapse:collapse;width:100%;font:12.5px/1.35 'DejaVu Sans Mono',monospace;background:#fff}
th,td{border:1px solid #cfd6c4;padding:3px 6px;text-align:right;vertical-align:top}
th{background:#e7ebdc;text-align:center}td.t{text-align:left}
.route{display:inline-block;padding:2px 10px;border-radius:3px;color:#fff;font-weight:bold}
.aggregate{background:#3f6e3a}.review{background:#a4532a}
.caution{border-left:5px solid #c49a2c;background:#fbf3dc;padding:8px 12px;margin:12px 0}
.flag{display:inline-block;background:#f0d9cc;border:1px solid #c98b6b;border-radius:2px;padding:0 4px;margin:1px}
code{font-family:'DejaVu Sans Mono',monospace;font-size:12px}
.pair{display:flex;gap:18px;flex-wrap:wrap}.pair>div{flex:1 1 320px}
@media print{body{background:#fff}main{max-width:none}}
"""


def _e(value) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def _f(value, digits: int = 4) -> str:
    return "n/a" if value is None else f"{value:.{digits}f}"


def rule_text(rule: Mapping | None) -> str:
    if not rule:
        return "none"
    if rule["kind"] == "constant":
        return "accept every lot" if rule["label"] else "reject every lot"
    if rule["kind"] == "threshold":
        above = "accept" if rule["above"] else "reject"
        below = "reject" if rule["above"] else "accept"
        return f"{rule['feature']} > {rule['cut']:g}: {above}; otherwise {below}"
    return f"listed rule {rule['name']}"


def _page(title: str, body: str) -> str:
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        "<meta name='viewport' content='width=device-width,initial-scale=1'>"
        f"<title>{_e(title)}</title><style>{STYLE}</style></head><body><main>{body}</main></body></html>\n"
    )


def _table(headers: Sequence[str], rows: Sequence[Sequence[str]], text_columns: Sequence[int] = (0,)) -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in headers)
    body = "".join(
        "<tr>" + "".join(f"<td class='t'>{c}</td>" if k in text_columns else f"<td>{c}</td>" for k, c in enumerate(row)) + "</tr>"
        for row in rows
    )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _axis_box(width: int, height: int, inner: str, label: str) -> str:
    return (
        f"<svg xmlns='http://www.w3.org/2000/svg' viewBox='0 0 {width} {height}' width='100%' style='max-width:{width + 100}px' role='img' "
        f"aria-label='{_e(label)}'><rect x='0' y='0' width='{width}' height='{height}' fill='#fff'/>{inner}</svg>"
    )


def scatter_disagreement_gain(sources: Sequence[Mapping]) -> str:
    """Disagreement (x) against the gain bracket (y), one dot per source."""
    return _scatter(sources, "gain_lower", "gain_upper", "gain from lying under ERM", "disagreement against gain per source")


def scatter_disagreement_pull(sources: Sequence[Mapping]) -> str:
    """Disagreement (x) against the pull on the consensus fit (y), one dot per source."""
    return _scatter(sources, "pull", "pull", "pull on the fit (others' added risk)", "disagreement against pull per source")


def _scatter(sources: Sequence[Mapping], low_key: str, high_key: str, y_label: str, label: str) -> str:
    width, height, pad = 460, 300, 44
    xs = [s["disagreement"] for s in sources] or [0.0]
    ys = [s[high_key] for s in sources] or [0.0]
    x_max = max(0.05, max(xs) * 1.15)
    y_max = max(0.02, max(ys) * 1.15)

    def px(x, y):
        return pad + x / x_max * (width - 2 * pad), height - pad - y / y_max * (height - 2 * pad)

    parts = [
        f"<line x1='{pad}' y1='{height - pad}' x2='{width - pad}' y2='{height - pad}' stroke='#555'/>",
        f"<line x1='{pad}' y1='{pad}' x2='{pad}' y2='{height - pad}' stroke='#555'/>",
        f"<text x='{width / 2}' y='{height - 8}' text-anchor='middle' font-size='12'>disagreement with consensus</text>",
        f"<text x='12' y='{height / 2}' transform='rotate(-90 12 {height / 2})' text-anchor='middle' font-size='12'>{_e(y_label)}</text>",
    ]
    for k in range(5):
        x, y = px(x_max * k / 4, y_max * k / 4)
        parts.append(f"<text x='{x:.1f}' y='{height - pad + 14}' font-size='10' text-anchor='middle'>{x_max * k / 4:.2f}</text>")
        parts.append(f"<text x='{pad - 4}' y='{y + 3:.1f}' font-size='10' text-anchor='end'>{y_max * k / 4:.3f}</text>")
    for s in sources:
        x, y = px(s["disagreement"], s[low_key])
        _, y_up = px(s["disagreement"], s[high_key])
        colour = "#a4532a" if s["flags"] else "#3f6e3a"
        if y_up < y:
            parts.append(f"<line x1='{x:.1f}' y1='{y:.1f}' x2='{x:.1f}' y2='{y_up:.1f}' stroke='{colour}' stroke-width='2'/>")
        parts.append(f"<circle cx='{x:.1f}' cy='{y:.1f}' r='5' fill='{colour}'/>")
        parts.append(f"<text x='{x + 7:.1f}' y='{y - 6:.1f}' font-size='11'>{_e(s['source_id'])}</text>")
    return _axis_box(width, height, "".join(parts), label)


def feature_plot(values: np.ndarray, accept_share: np.ndarray, feature: str, cuts: Mapping[str, float | None]) -> str:
    """Each lot at its feature value (x) and the share of sources accepting it (y), with the cuts."""
    width, height, pad = 460, 300, 44
    low, high = float(values.min()), float(values.max())
    span = (high - low) or 1.0

    def sx(v):
        return pad + (v - low) / span * (width - 2 * pad)

    def sy(v):
        return height - pad - v * (height - 2 * pad)

    parts = [
        f"<line x1='{pad}' y1='{height - pad}' x2='{width - pad}' y2='{height - pad}' stroke='#555'/>",
        f"<line x1='{pad}' y1='{pad}' x2='{pad}' y2='{height - pad}' stroke='#555'/>",
        f"<text x='{width / 2}' y='{height - 8}' text-anchor='middle' font-size='12'>{_e(feature)}</text>",
        f"<text x='12' y='{height / 2}' transform='rotate(-90 12 {height / 2})' text-anchor='middle' font-size='12'>share of sources accepting</text>",
    ]
    for k in range(5):
        parts.append(f"<text x='{pad - 4}' y='{sy(k / 4) + 3:.1f}' font-size='10' text-anchor='end'>{k / 4:.2f}</text>")
        v = low + span * k / 4
        parts.append(f"<text x='{sx(v):.1f}' y='{height - pad + 14}' font-size='10' text-anchor='middle'>{v:.1f}</text>")
    for v, share in zip(values, accept_share):
        colour = "#3f6e3a" if share >= 0.5 else "#a4532a"
        parts.append(f"<circle cx='{sx(v):.1f}' cy='{sy(share):.1f}' r='2.2' fill='{colour}' fill-opacity='0.6'/>")
    styles = {"consensus": ("#1d2a22", ""), "drawn": ("#2a5ea4", "stroke-dasharray='6 4'")}
    for row, (name, cut) in enumerate(cuts.items()):
        if cut is None:
            continue
        colour, dash = styles[name]
        parts.append(f"<line x1='{sx(cut):.1f}' y1='{pad - 6}' x2='{sx(cut):.1f}' y2='{height - pad}' stroke='{colour}' stroke-width='2' {dash}/>")
        parts.append(f"<text x='{sx(cut) + 4:.1f}' y='{pad + 6 + 14 * row}' font-size='11' fill='{colour}'>{name} cut {cut:g}</text>")
    return _axis_box(width, height, "".join(parts), f"{feature} with the consensus and drawn cuts")


def render_report(decision: Mapping, analysis=None, in_force_before: Mapping | None = None) -> str:
    """The batch's ``report.html``."""
    from truthsieve.pipeline.report_ledger import in_force_section

    date = decision["batch_date"]
    route = decision["route"]
    parts = [
        f"<h1>Label batch {_e(date)}</h1>",
        f"<p>Route: <span class='route {_e(route)}' id='route'>{_e(route)}</span> &middot; tool version {_e(decision['tool_version'])}</p>",
        f"<div class='caution'><strong>Caution.</strong> {_e(CAUTION)}</div>",
        "<h2 id='reasons'>Decision and reasons</h2>",
    ]
    reasons = decision["reasons"]
    parts.append(
        _table(
            ["code", "blocking", "source", "what it means"],
            [[_e(r["code"]), "yes" if r["blocking"] else "no", _e(r.get("source_id", "")), _e(r["message"])] for r in reasons],
            text_columns=(0, 2, 3),
        )
        if reasons
        else "<p>No reasons: every check of the routing policy passed.</p>"
    )
    parts.append(in_force_section(decision, in_force_before))

    consensus, mechanism, drawn = decision["consensus"], decision["mechanism"], decision["draw"]
    parts.append("<h2 id='rules'>Consensus rule and drawn rule</h2>")
    if consensus is None:
        parts.append("<p>No rule could be fitted: the batch had no valid items table or no valid source.</p>")
    else:
        parts.append(
            _table(
                ["", "rule", "global risk"],
                [
                    ["consensus fit (ERM)", _e(rule_text(consensus["rule"])), _f(consensus["risk"])],
                    [f"drawn by {_e(mechanism['name'])}", _e(rule_text(drawn["rule"])), _f(mechanism["lottery"][drawn["index"]]["risk"])],
                ],
                text_columns=(0, 1),
            )
        )
        plotted = next((r for r in (consensus["rule"], drawn["rule"]) if r["kind"] == "threshold"), None)
        if plotted is not None and analysis is not None:
            feature = next(f for f in analysis.rule_class.features if f.name == plotted["feature"])
            share = (analysis.matrix.labels * analysis.matrix.labelled).sum(axis=0) / np.maximum(analysis.matrix.labelled.sum(axis=0), 1)
            cuts = {
                name: (rule["cut"] if rule["kind"] == "threshold" and rule["feature"] == feature.name else None)
                for name, rule in (("consensus", consensus["rule"]), ("drawn", drawn["rule"]))
            }
            parts.append(f"<div id='feature-plot'>{feature_plot(feature.values, share, feature.name, cuts)}</div>")

    parts.append("<h2 id='sources'>Sources</h2>")
    rows = []
    for s in decision["sources"]:
        low, high = s["disagreement_interval"]
        bracket = _f(s["gain_lower"]) if s["gain_exact"] else f"{_f(s['gain_lower'])}&ndash;{_f(s['gain_upper'])}"
        rows.append(
            [
                _e(s["source_id"]), _f(s["weight"], 3), str(s["items"]),
                f"{_f(s['disagreement'])} [{_f(low, 3)}, {_f(high, 3)}]", _f(s["own_best_risk"]),
                bracket + ("" if s["gain_exact"] else " (bound)"), _f(s.get("pull")),
                f"{s['lie_weight_lower']:.1f}&ndash;{s['lie_weight_upper']:.1f}", _f(s["kappa"], 3),
                _f(s["balanced_accuracy"], 3),
                "".join(f"<span class='flag'>{_e(f)}</span>" for f in s["flags"]) or "&ndash;",
            ]
        )
    parts.append(
        _table(
            ["source", "weight", "items", "disagreement [Wilson]", "own best risk", "gain under ERM", "pull on the fit", "cheapest lie (item weight)", "kappa", "balanced accuracy", "flags"],
            rows,
            text_columns=(0, 10),
        )
        if rows
        else "<p>No valid source.</p>"
    )
    if decision["sources"]:
        parts.append("<div class='pair'><div><h2 id='pull-chart'>Disagreement against pull</h2>")
        parts.append(scatter_disagreement_pull(decision["sources"]))
        parts.append(
            "<p><strong>Pull</strong> is how much a source's report moves the consensus fit against everyone else: "
            "the other sources' weighted risk at the consensus minus their risk at their own ERM. A strategic "
            "report that already won shows a large pull (often with a rule-shaped report); an honest source in "
            "the majority shows almost none. Red dots carry flags.</p></div>"
        )
        parts.append("<div><h2 id='gain-chart'>Disagreement against gain</h2>")
        parts.append(scatter_disagreement_gain(decision["sources"]))
        parts.append(
            "<p><strong>Gain</strong> is the temptation of a source reporting as it does now, under plain ERM: how much "
            "it could lower its own risk (judged on its own report) by reporting other labels if the consensus fit "
            "were used. A liar whose lie already won shows gain 0; look at its pull. The lottery used here "
            "gives no gain to anyone. Bars span the gain bracket where it is a bound.</p></div></div>"
        )

    parts.append("<h2 id='lottery'>Lottery</h2>")
    if mechanism is not None:
        parts.append(
            _table(
                ["entry", "source", "probability", "rule", "global risk"],
                [[str(k), _e(e["source_id"] or "&ndash;"), _f(e["probability"], 6), _e(rule_text(e["rule"])), _f(e["risk"])] for k, e in enumerate(mechanism["lottery"])],
                text_columns=(1, 3),
            )
        )
        applies = "applies" if mechanism["guarantee_applies"] else "does not apply (sources labelled different items)"
        parts.append(
            f"<p>Expected risk <strong>{_f(mechanism['expected_risk'])}</strong>; ratio to the consensus "
            f"<strong id='ratio'>{_f(mechanism['ratio'], 4)}</strong>; worst-case guarantee {_f(mechanism['guarantee'], 4)} ({applies}). "
            f"About <span id='items-needed'>{_e(decision['items_needed'])}</span> shared items suffice for every source's risk estimate of every rule "
            f"to be within the configured accuracy (uniform convergence through the class's growth function); this batch has {_e(decision['n_items'])}.</p>"
        )
        parts.append("<h2 id='draw'>Draw</h2>")
        parts.append(
            f"<p>Draw revision <span id='draw-revision'>{_e(drawn.get('revision', 0))}</span>. "
            f"u = <code id='draw-u'>{drawn['u']!r}</code> = HMAC-SHA256(key, \"{_e(drawn.get('message', date))}\") as a 53-bit fraction; "
            f"key fingerprint <code>{_e(drawn['key_fingerprint'])}</code> ({_e(drawn['key_source'])} key). "
            f"Entry {drawn['index']} is the first whose cumulative probability exceeds u. "
            f"Configuration <code id='config-sha256'>{_e(decision.get('config_sha256'))}</code>. "
            "The first published draw of a night stands: a re-screen with changed inputs gets the next revision, a fresh u, "
            "and goes to review.</p>"
        )
        earlier = decision.get("earlier_draws") or []
        if earlier:
            parts.append(
                _table(
                    ["earlier revision", "u", "drawn source", "rule", "route"],
                    [[_e(d["revision"]), _e(d["u"]), _e(d["source_id"]) or "&ndash;", _e(rule_text(d["rule"])), _e(d["route"])] for d in earlier],
                    text_columns=(2, 3, 4),
                )
            )
    parts.append("<h2 id='inputs'>Input files</h2>")
    parts.append(
        _table(
            ["file", "rows", "sha256", "valid"],
            [[_e(f["path"]), _e(f["rows"]), f"<code>{_e(f['sha256'])}</code>", "yes" if f["valid"] else "no"] for f in decision["inputs"]],
            text_columns=(0, 2),
        )
    )
    if decision["errors"]:
        parts.append("<h2 id='quarantine'>Quarantined files and their errors</h2>")
        parts.append(
            _table(
                ["file", "row", "column", "rule", "message"],
                [[_e(e["file"]), _e(e["row"]), _e(e["column"]), _e(e["rule"]), _e(e["message"])] for e in decision["errors"]],
                text_columns=(0, 2, 3, 4),
            )
        )
    if decision.get("absent") or decision.get("notes"):
        parts.append("<h2 id='absent-notes'>Absent sources and notes on the inbox</h2>")
        rows = [[_e(a["source_id"]), _e(a["why"]), ""] for a in decision.get("absent", [])]
        rows += [[_e(n["path"]), _e(n["code"]), _e(n["message"])] for n in decision.get("notes", [])]
        parts.append(_table(["source or path", "code", "message"], rows, text_columns=(0, 1, 2)))
    return _page(f"truthsieve batch {date}", "".join(parts))


def render_index(decisions: Sequence[Mapping], ledger_entries: Sequence[Mapping] = ()) -> str:
    """``index.html``: the rule in force now; per night route, verdict and who, rule in force
    after the night, ratio and flags per source."""
    from truthsieve.pipeline.ledger import derive, nights
    from truthsieve.pipeline.report_ledger import verdict_cell

    ledger_nights = nights(ledger_entries)
    now = derive(ledger_entries)
    decisions = sorted(decisions, key=lambda d: d["batch_date"])
    sources = sorted({s["source_id"] for d in decisions for s in d["sources"]} | {q["source_id"] for d in decisions for q in d["quarantined"] if q["source_id"]})
    rows = []
    for d in decisions:
        by_source = {s["source_id"]: s["flags"] for s in d["sources"]}
        quarantined = {q["source_id"] for q in d["quarantined"]}
        cells = []
        for source in sources:
            if source in quarantined:
                cells.append("<span class='flag'>quarantined</span>")
            elif source not in by_source:
                cells.append("")
            else:
                cells.append("".join(f"<span class='flag'>{_e(f)}</span>" for f in by_source[source]) or "&middot;")
        ratio = d["mechanism"]["ratio"] if d["mechanism"] else None
        link = f"<a href='batch_date={_e(d['batch_date'])}/report.html'>{_e(d['batch_date'])}</a>"
        then = derive(ledger_entries, d["batch_date"])
        rows.append(
            [
                link, f"<span class='route {_e(d['route'])}'>{_e(d['route'])}</span>",
                verdict_cell(ledger_nights.get(d["batch_date"])), _e(rule_text(then["rule"])), _f(ratio, 3), *cells,
            ]
        )
    since = f" since {_e(now['since'])} (ledger line {_e(now['seq'])})" if now["rule"] else ""
    body = (
        "<h1>Label batches, night by night</h1>"
        f"<p id='in-force'>Rule in force now: <strong>{_e(rule_text(now['rule']))}</strong>{since}.</p>"
        f"<div class='caution'><strong>Caution.</strong> {_e(CAUTION)}</div>"
        + _table(["night", "route", "verdict", "rule in force after", "ratio", *sources], rows, text_columns=tuple(range(5 + len(sources))))
    )
    return _page("truthsieve history", body)

