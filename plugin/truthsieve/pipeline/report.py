"""The reviewer's page of one batch (``report.html``); the history page is in :mod:`report_index`.

Self-contained HTML with hand-made inline SVG charts: no scripts, no network fetches.
Every value that comes from input data goes through :func:`html.escape`. Pure: the
earlier nights of the history strip and the routing policy (for the flags' limits) are
passed in.

The first screen answers four questions in one sentence each: what was decided, which
rule is in force and since when, what a person must do next, and who pulled the fit.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from truthsieve.pipeline.decision import Decision
from truthsieve.pipeline.routing import Reason
from truthsieve.pipeline.report_html import CAUTION, chip, e, f, page, route_badge, rule_text, table

# kept importable from here: other modules and tests use these names
_e, _f, _table = e, f, table

APPLY_COMMAND = "truthsieve apply --out OUT --items ITEMS.parquet --write LABELLED.parquet"


def verdict_command(date: str) -> str:
    return f"truthsieve verdict --out OUT --date {date} (--approve | --reject) --by NAME --note TEXT"


def _plain_reasons(decision: Decision) -> str:
    from truthsieve.pipeline.routing import REASON_CODES

    blocking = sorted({r.code for r in decision.reasons if r.blocking})
    return "; ".join(f"{REASON_CODES.get(c, c)} ({c})" for c in blocking) or "none"


def summary_box(decision: Decision, before: Mapping | None, policy=None) -> str:
    """Four sentences: decided, in force, next step, who pulled."""
    date, route, drawn, classes = decision.batch_date, decision.route, decision.draw, decision.classes
    rule = rule_text(drawn.rule, classes) if drawn else None
    who = (drawn.source_id if drawn else None) or "a rule lottery"
    if route == "aggregate":
        decided = f"Aggregated: the strategy-proof lottery drew {e(who)}'s rule, <strong>{e(rule)}</strong>, and published it."
        in_force = f"Rule in force now: <strong>{e(rule)}</strong>, since this night ({e(date)})."
        step = f"Nothing is needed to use it: label lots with <code>{e(APPLY_COMMAND)}</code>. Flagged sources are alerted; their evidence is below."
    else:
        decided = f"Sent to review: {e(_plain_reasons(decision))}. " + (
            f"The drawn rule ({e(who)}'s), <strong>{e(rule)}</strong>, would apply if approved; it is not in force." if rule else "No rule could be drawn."
        )
        if before is None:
            in_force = "Rule in force now: unchanged by this night (see <code>in_force.json</code> or <code>truthsieve in-force --out OUT</code>)."
        elif before.get("rule"):
            in_force = f"Rule in force now: <strong>{e(rule_text(before['rule'], classes))}</strong>, since {e(before['since'])}; this night leaves it unchanged until a verdict."
        else:
            in_force = "Rule in force now: none (no night aggregated or approved yet)."
        step = f"A reviewer records a verdict: <code>{e(verdict_command(date))}</code> (OUT is the folder holding index.html)."
    for q in decision.quarantined:
        first = next((x for x in decision.errors if q.source_id is None or f"source_id={q.source_id}/" in x.file), None)
        where = f": first at {e(first.file)}, row {e(first.row or '-')}, column {e(first.column or '-')}" if first else ""
        step += f" {e(q.source_id or 'The platform')} must deliver a corrected file{where} (see <a href='#quarantine'>quarantined files</a>)."
    absent = [a.source_id for a in decision.absent if a.why == "no_folder"]
    if absent:
        step += f" Absent tonight: {e(', '.join(absent))}."
    sources = decision.sources
    if sources:
        top = max(sources, key=lambda s: s.pull or 0.0)
        limit = getattr(policy, "max_pull", None)
        consensus = rule_text(decision.consensus.rule, classes)
        if "pulls_fit" in top.flags:
            pulled = (
                f"{e(top.source_id)} pulled the fit most: pull <span id='top-pull'>{f(top.pull)}</span>"
                + (f" (limit {limit:g})" if limit is not None else "")
                + f", the others' weighted error its grades add. Plain ERM would publish <strong>{e(consensus)}</strong>."
            )
        else:
            pulled = f"No source pulled the fit beyond the limit: the largest pull is <span id='top-pull'>{f(top.pull)}</span> ({e(top.source_id)})."
    else:
        pulled = "No valid source: nothing was fitted."
    kind = "summary review" if route == "review" else "summary"
    return (
        f"<div class='{kind}' id='summary'><p id='decided'>{decided}</p><p id='in-force-now'>{in_force}</p>"
        f"<p id='next-step'><strong>Next step.</strong> {step}</p><p id='who-pulled'>{pulled}</p></div>"
    )


def reasons_by_source(decision: Decision, policy=None) -> str:
    """One row for the night's own reasons, one per source: its codes as chips, in words."""
    from truthsieve.pipeline.evidence import FLAG_NAMES, flag_sentence

    groups: dict[str | None, list[Reason]] = {}
    for r in decision.reasons:
        groups.setdefault(r.source_id, []).append(r)
    by_id = {s.source_id: s for s in decision.sources}
    rows = []
    for key in sorted(groups, key=lambda k: (k is not None, k or "")):
        reasons = groups[key]
        blocks = "<strong>yes</strong>" if any(r.blocking for r in reasons) else "no"
        source = by_id.get(key)
        if source is not None and policy is not None and source.flags:
            chips = "".join(chip(FLAG_NAMES.get(c, c), title=c) for c in source.flags)
            words = "<br>".join(e(flag_sentence(c, source, policy, classes=decision.classes)) for c in source.flags)
            other = [r for r in reasons if r.code not in ("source_noted", "source_flagged")]
            chips += "".join(chip(r.code) for r in other)
            words += "".join(f"<br>{e(r.message)}" for r in other)
        else:
            chips = "".join(chip(r.code, "calm" if not r.blocking else "") for r in reasons)
            words = "<br>".join(e(r.message) for r in reasons)
        rows.append([e(key or "the night"), blocks, chips, words])
    if not rows:
        return "<p>No reasons: every check of the routing policy passed.</p>"
    return table(["who", "sends to review", "codes", "what was found"], rows, text_columns=(0, 1, 2, 3))


def _rules(decision: Decision, analysis) -> str:
    from truthsieve.pipeline.report_charts import feature_plot

    consensus, mechanism, drawn, classes = decision.consensus, decision.mechanism, decision.draw, decision.classes
    parts = ["<section class='page'><h2 id='rules'>The drawn rule and the plain ERM fit</h2>"]
    if consensus is None:
        return parts[0] + "<p>No rule could be fitted: the night had no valid items table or no valid source.</p></section>"
    status = "in force" if decision.route == "aggregate" else "would apply if approved"
    parts.append(
        table(
            ["", "rule", "global risk", "status"],
            [
                [f"drawn by {e(mechanism.name)} ({e(drawn.source_id or 'rule lottery')})", e(rule_text(drawn.rule, classes)), f(mechanism.lottery[drawn.index].risk), e(status)],
                ["plain ERM (the consensus fit; counterfactual)", e(rule_text(consensus.rule, classes)), f(consensus.risk), "not published"],
            ],
            text_columns=(0, 1, 3),
        )
    )
    plotted = next((r for r in (drawn.rule, consensus.rule) if r["kind"] == "threshold"), None)
    if plotted is not None and analysis is not None:
        feature = next(x for x in analysis.rule_class.features if x.name == plotted["feature"])
        m = analysis.matrix
        cuts = {
            name: (rule["cut"] if rule["kind"] == "threshold" and rule["feature"] == feature.name else None)
            for name, rule in (("consensus fit", consensus.rule), ("drawn", drawn.rule))
        }
        names = classes
        if names is not None and len(names) > 2:
            parts.append(_class_figure(m, feature, cuts, names))
            return "".join(parts) + "</section>"
        share = (m.labels * m.labelled).sum(axis=0) / np.maximum(m.labelled.sum(axis=0), 1)
        parts.append(
            f"<figure id='feature-plot'>{feature_plot(feature.values, share, feature.name, cuts)}<figcaption>Each dot is a lot (or a bin of lots, "
            f"as the chart says) at its {e(feature.name)} value, placed at the share of sources that accepted it; blue dots are accepted by at least half, "
            "amber ones by fewer. The solid line is the plain ERM fit's cut, the dashed purple one the drawn rule's cut.</figcaption></figure>"
        )
    return "".join(parts) + "</section>"


def _class_figure(m, feature, cuts: Mapping, names) -> str:
    from truthsieve.pipeline.report_charts import class_plot, majority_classes

    majority, share = majority_classes(m.labels, m.labelled, len(names))
    return (
        f"<figure id='feature-plot'>{class_plot(feature.values, majority, share, feature.name, cuts, names)}<figcaption>Each dot is a lot "
        f"(or a group of lots, as the chart says) at its {e(feature.name)} value, placed at the share of its sources that gave it its majority "
        "class and coloured by that class (the legend names every class, dark to light in class order; a tie goes to the lower class). "
        "The solid line is the plain ERM fit's cut, the dashed purple one the drawn rule's cut.</figcaption></figure>"
    )


def _sources(decision: Decision, recent, policy) -> str:
    from truthsieve.pipeline.evidence import FLAG_NAMES
    from truthsieve.pipeline.report_charts import history_strip, pull_chart

    parts = ["<section class='page'><h2 id='sources'>Sources</h2>"]
    rows = []
    for s in decision.sources:
        low, high = s.disagreement_interval
        bracket = f(s.gain_lower) if s.gain_exact else f"{f(s.gain_lower)}&ndash;{f(s.gain_upper)} (bound)"
        rows.append(
            [
                e(s.source_id), f(s.weight, 3), str(s.items), f"{f(s.disagreement)} [{f(low, 3)}, {f(high, 3)}]",
                f(s.own_best_risk), bracket, f(s.pull), f(s.kappa, 3), f(s.balanced_accuracy, 3),
                "".join(chip(FLAG_NAMES.get(c, c), title=c) for c in s.flags) or "&ndash;",
            ]
        )
    if not rows:
        return parts[0] + "<p>No valid source.</p></section>"
    parts.append(
        table(
            ["source", "weight", "items", "disagreement [Wilson]", "own best risk", "gain under ERM", "pull on the fit", "kappa", "balanced accuracy", "flags"],
            rows, text_columns=(0, 9),
        )
    )
    parts.append("<h3 id='pull-chart'>Pull against disagreement</h3>")
    parts.append(pull_chart(decision.sources, getattr(policy, "max_pull", None)))
    parts.append(
        "<p><strong>What is drawn:</strong> one mark per source, numbered as in the table beside it; across, the share of lots on which its grades "
        "differ from the plain ERM fit; up, its <strong>pull</strong>: how much its grades raise the other sources' weighted error by moving that fit. "
        "Amber squares carry flags, blue circles none; the dashed line is the pull limit. An honest member in the majority sits low; a heavy member "
        "whose grades moved the fit sits high. <strong>Gain under ERM</strong> (table) is the temptation: how much a member could lower its own error "
        "by grading differently if the plain fit were published. The lottery used here gives no such gain.</p>"
    )
    parts.append("<h3 id='history'>Recent nights, per source</h3>")
    parts.append(history_strip(recent or [], decision))
    parts.append("<p>Each column is a night (month-day), the last one tonight: the route on top, then each source's flags, or quarantined / absent.</p>")
    return "".join(parts) + "</section>"


def _lottery(decision: Decision) -> str:
    mechanism, drawn, classes = decision.mechanism, decision.draw, decision.classes
    if mechanism is None:
        return ""
    parts = ["<section class='page'><h2 id='lottery'>Lottery</h2>"]
    parts.append(
        table(
            ["entry", "source", "probability", "rule", "global risk"],
            [[str(k), e(x.source_id or "&ndash;"), f(x.probability, 6), e(rule_text(x.rule, classes)), f(x.risk)] for k, x in enumerate(mechanism.lottery)],
            text_columns=(1, 3),
        )
    )
    applies = "applies" if mechanism.guarantee_applies else "does not apply (sources labelled different items)"
    parts.append(
        f"<p>Expected risk <strong>{f(mechanism.expected_risk)}</strong>; ratio to the plain ERM fit's risk "
        f"<strong id='ratio'>{f(mechanism.ratio, 4)}</strong> (the price of strategy-proofness tonight; 1 means none); worst-case guarantee "
        f"{f(mechanism.guarantee, 4)} ({applies}). About <span id='items-needed'>{e(decision.items_needed)}</span> shared items suffice for every "
        f"source's risk estimate of every rule to be within the configured accuracy (uniform convergence through the class's growth function); this night has {e(decision.n_items)}.</p>"
    )
    parts.append("<h3 id='draw'>Draw</h3>")
    parts.append(
        f"<p>Draw revision <span id='draw-revision'>{e(drawn.revision)}</span>. "
        f"u = <code id='draw-u'>{drawn.u!r}</code> = HMAC-SHA256(key, \"{e(drawn.message)}\") as a 53-bit fraction; "
        f"key fingerprint <code>{e(drawn.key_fingerprint)}</code> ({e(drawn.key_source)} key). "
        f"Entry {drawn.index} is the first whose cumulative probability exceeds u. "
        f"Configuration <code id='config-sha256'>{e(decision.config_sha256)}</code>. "
        "The first published draw of a night stands: a re-screen with changed inputs gets the next revision, a fresh u, and goes to review.</p>"
    )
    earlier = decision.earlier_draws  # each in its JSON form (see revisions.py)
    if earlier:
        parts.append(
            table(
                ["earlier revision", "u", "drawn source", "rule", "route"],
                [[e(d["revision"]), e(d["u"]), e(d["source_id"]) or "&ndash;", e(rule_text(d["rule"], classes)), e(d["route"])] for d in earlier],
                text_columns=(2, 3, 4),
            )
        )
    return "".join(parts) + "</section>"


def _inputs(decision: Decision) -> str:
    from truthsieve.pipeline.evidence import fix_for

    parts = ["<section class='page'><h2 id='inputs'>Input files</h2>"]
    parts.append(
        table(
            ["file", "rows", "sha256", "valid"],
            [[e(x.path), e(x.rows), f"<code>{e(x.sha256)}</code>", "yes" if x.valid else "no"] for x in decision.inputs],
            text_columns=(0, 2),
        )
    )
    if decision.errors:
        parts.append("<h3 id='quarantine'>Quarantined files and what to fix</h3>")
        rows = []
        for x in decision.errors:
            rows.append([e(x.file), e(x.row), e(x.column), chip(x.code, title=f"former code {x.rule}"), e(x.rule), e(x.message), e(fix_for(x.code))])
        parts.append(table(["file", "row", "column", "code", "former code", "what was found", "what to fix"], rows, text_columns=(0, 2, 3, 4, 5, 6)))
    if decision.absent or decision.notes:
        parts.append("<h3 id='absent-notes'>Absent sources and notes on the inbox</h3>")
        rows = [[e(a.source_id), e(a.why), ""] for a in decision.absent]
        rows += [[e(n.path), e(n.code), e(n.message)] for n in decision.notes]
        parts.append(table(["source or path", "code", "message"], rows, text_columns=(0, 1, 2)))
    return "".join(parts) + "</section>"


def render_report(decision: Decision, analysis=None, in_force_before: Mapping | None = None, recent: Sequence[Mapping] | None = None, policy=None) -> str:
    """The batch's ``report.html``. ``recent``: earlier nights for the history strip (see
    :func:`truthsieve.pipeline.report_history.recent_nights`); ``policy``: the routing
    policy, for the flags' limits."""
    from truthsieve.pipeline.report_ledger import in_force_section

    date = decision.batch_date
    head = (
        "<nav><a href='../index.html' id='to-index'>&larr; all nights (index)</a></nav>"
        f"<h1>Label batch {e(date)} <span id='route' class='route {e(decision.route)}'>{e(decision.route)}</span></h1>"
        + summary_box(decision, in_force_before, policy)
        + "<h2 id='reasons'>Reasons, by source</h2>"
        + reasons_by_source(decision, policy)
        + in_force_section(decision, in_force_before)
        + f"<div class='caution'><strong>Caution.</strong> {e(CAUTION)} Tool version {e(decision.tool_version)}.</div>"
    )
    body = head + _rules(decision, analysis) + _sources(decision, recent, policy) + _lottery(decision) + _inputs(decision)
    return page(f"truthsieve batch {date}", body)


def render_index(decisions: Sequence[Decision], ledger_entries: Sequence[Mapping] = (), unreadable: Mapping[str, str] = {}) -> str:
    from truthsieve.pipeline.report_index import render_index as render

    return render(decisions, ledger_entries, unreadable)


__all__ = ["render_report", "render_index", "rule_text", "route_badge", "CAUTION"]
