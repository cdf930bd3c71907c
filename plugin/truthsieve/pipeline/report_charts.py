"""Hand-made inline SVG charts of the report: no scripts, no network fetches.

Point labels never overlap: each dot carries a number and a legend table beside the chart
lists number, source and the plotted values. The feature plot bins the lots when there are
many (the report stays small at millions of labels) and says so on the chart.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from truthsieve.pipeline.decision import Decision, SourceEntry
from truthsieve.pipeline.report_html import PALETTE as P
from truthsieve.pipeline.report_html import e, f, table

MAX_POINTS = 400  # above this many lots the feature plot shows bins
BINS = 120

W, H, PAD = 460, 300, 46


def _frame(x_label: str, y_label: str, x_ticks, y_ticks) -> list[str]:
    parts = [
        f"<line x1='{PAD}' y1='{H - PAD}' x2='{W - PAD}' y2='{H - PAD}' stroke='{P['ink']}'/>",
        f"<line x1='{PAD}' y1='{PAD}' x2='{PAD}' y2='{H - PAD}' stroke='{P['ink']}'/>",
        f"<text x='{W / 2}' y='{H - 8}' text-anchor='middle' font-size='12'>{e(x_label)}</text>",
        f"<text x='12' y='{H / 2}' transform='rotate(-90 12 {H / 2})' text-anchor='middle' font-size='12'>{e(y_label)}</text>",
    ]
    for x, text in x_ticks:
        parts.append(f"<text x='{x:.1f}' y='{H - PAD + 14}' font-size='10' text-anchor='middle'>{e(text)}</text>")
    for y, text in y_ticks:
        parts.append(f"<text x='{PAD - 4}' y='{y + 3:.1f}' font-size='10' text-anchor='end'>{e(text)}</text>")
    return parts


def _svg(inner: Sequence[str], label: str) -> str:
    return (
        f"<svg xmlns='http://www.w3.org/2000/svg' viewBox='0 0 {W} {H}' width='100%' style='max-width:{W + 60}px' role='img' "
        f"aria-label='{e(label)}'><rect x='0' y='0' width='{W}' height='{H}' fill='{P['panel']}'/>{''.join(inner)}</svg>"
    )


def pull_chart(sources: Sequence[SourceEntry], max_pull: float | None) -> str:
    """Disagreement (x) against pull (y): one numbered dot per source, a legend table with the
    exact values, the pull limit as a dashed line. Flagged sources are amber squares,
    unflagged ones blue circles (shape and colour both say it)."""
    xs = [s.disagreement for s in sources] or [0.0]
    ys = [s.pull or 0.0 for s in sources] or [0.0]
    x_max = max(0.05, max(xs) * 1.15)
    y_max = max(0.02, max(ys) * 1.15, (max_pull or 0) * 1.3)

    def px(x, y):
        return PAD + x / x_max * (W - 2 * PAD), H - PAD - y / y_max * (H - 2 * PAD)

    ticks = [px(x_max * k / 4, y_max * k / 4) for k in range(5)]
    parts = _frame(
        "disagreement with the consensus fit", "pull on the fit",
        [(x, f"{x_max * k / 4:.2f}") for k, (x, _) in enumerate(ticks)],
        [(y, f"{y_max * k / 4:.3f}") for k, (_, y) in enumerate(ticks)],
    )
    if max_pull is not None:
        _, y = px(0, max_pull)
        parts.append(f"<line x1='{PAD}' y1='{y:.1f}' x2='{W - PAD}' y2='{y:.1f}' stroke='{P['heed_ink']}' stroke-dasharray='5 4'/>")
        parts.append(f"<text x='{W - PAD}' y='{y - 4:.1f}' font-size='10' text-anchor='end' fill='{P['heed_ink']}'>pull limit {max_pull:g}</text>")
    rows = []
    for k, s in enumerate(sources, start=1):
        x, y = px(s.disagreement, s.pull or 0.0)
        data = f"data-source='{e(s.source_id)}' data-pull='{s.pull!r}' data-disagreement='{s.disagreement!r}'"
        if s.flags:
            parts.append(f"<rect x='{x - 7:.1f}' y='{y - 7:.1f}' width='14' height='14' fill='{P['heed']}' stroke='{P['ink']}' {data}/>")
        else:
            parts.append(f"<circle cx='{x:.1f}' cy='{y:.1f}' r='7' fill='{P['calm']}' stroke='{P['ink']}' {data}/>")
        colour = P["ink"] if s.flags else "#fff"
        parts.append(f"<text x='{x:.1f}' y='{y + 3.5:.1f}' font-size='10' text-anchor='middle' fill='{colour}'>{k}</text>")
        rows.append([str(k), e(s.source_id), f(s.disagreement), f"<span class='pull'>{f(s.pull)}</span>", "flagged" if s.flags else "&ndash;"])
    chart = _svg(parts, "disagreement against pull, one numbered mark per source")
    legend = table(["#", "source", "disagreement", "pull", ""], rows, text_columns=(1, 4))
    return f"<div class='pair'><div>{chart}</div><div id='pull-legend'>{legend}</div></div>"


def _cut_lines(parts: list[str], sx, cuts: Mapping[str, float | None]) -> None:
    styles = {"consensus fit": (P["ink"], ""), "drawn": (P["cut"], "stroke-dasharray='6 4'")}
    for row, (name, cut) in enumerate(cuts.items()):
        if cut is None:
            continue
        colour, dash = styles[name]
        parts.append(f"<line x1='{sx(cut):.1f}' y1='{PAD - 4}' x2='{sx(cut):.1f}' y2='{H - PAD}' stroke='{colour}' stroke-width='2' {dash}/>")
        parts.append(f"<text x='{sx(cut) + 4:.1f}' y='{PAD + 8 + 14 * row}' font-size='11' fill='{colour}'>{e(name)} cut {cut:g}</text>")


def _axes(values: np.ndarray):
    low, high = float(values.min()), float(values.max())
    span = (high - low) or 1.0

    def sx(v):
        return PAD + (v - low) / span * (W - 2 * PAD)

    def sy(v):
        return H - PAD - v * (H - 2 * PAD)

    return low, span, sx, sy


def feature_plot(values: np.ndarray, accept_share: np.ndarray, feature: str, cuts: Mapping[str, float | None]) -> str:
    """The share of sources accepting each lot (y) at its feature value (x), with the cuts.
    Above :data:`MAX_POINTS` lots, the lots are put in :data:`BINS` equal-width bins and each
    bin shows its mean share (dot area grows with the bin's count)."""
    values = np.asarray(values, dtype=np.float64)
    low, span, sx, sy = _axes(values)

    parts = _frame(
        feature, "share of sources accepting",
        [(sx(low + span * k / 4), f"{low + span * k / 4:.1f}") for k in range(5)],
        [(sy(k / 4), f"{k / 4:.2f}") for k in range(5)],
    )
    high = float(values.max())
    if len(values) > MAX_POINTS:
        edges = np.linspace(low, high, BINS + 1)
        which = np.clip(np.searchsorted(edges, values, side="right") - 1, 0, BINS - 1)
        counts = np.bincount(which, minlength=BINS)
        sums = np.bincount(which, weights=accept_share, minlength=BINS)
        centres = (edges[:-1] + edges[1:]) / 2
        points = [(centres[b], sums[b] / counts[b], 1.5 + 3.5 * np.sqrt(counts[b] / counts.max())) for b in np.flatnonzero(counts)]
        note = f"{len(values)} lots in {len(points)} bins of width {span / BINS:.3g}: each dot is a bin's mean share"
    else:
        points = [(v, s, 2.4) for v, s in zip(values, accept_share)]
        note = f"{len(values)} lots, one dot each"
    for v, share, r in points:
        colour = P["calm"] if share >= 0.5 else P["heed"]
        parts.append(f"<circle cx='{sx(v):.1f}' cy='{sy(share):.1f}' r='{r:.1f}' fill='{colour}' fill-opacity='0.7'/>")
    parts.append(f"<text x='{PAD + 4}' y='{PAD - 12}' font-size='10' id='feature-plot-note'>{e(note)}</text>")
    _cut_lines(parts, sx, cuts)
    return _svg(parts, f"{feature}: share of sources accepting, with the cuts")


def majority_classes(labels: np.ndarray, labelled: np.ndarray, n_classes: int) -> tuple[np.ndarray, np.ndarray]:
    """Per lot: (its majority class, the share of its sources giving that class); a tie goes
    to the lowest class index, a lot nobody labelled is class 0 with share 0."""
    counts = np.stack([((labels == k) & labelled).sum(axis=0) for k in range(n_classes)])
    return counts.argmax(axis=0), counts.max(axis=0) / np.maximum(labelled.sum(axis=0), 1)


def class_plot(values: np.ndarray, majority: np.ndarray, share: np.ndarray, feature: str, cuts: Mapping[str, float | None], names: Sequence[str]) -> str:
    """K classes: each lot (x: its feature value) at the share of its sources that gave its
    majority class (y), coloured by that class (:func:`class_colours`), with a legend naming
    every class and the cuts. Above :data:`MAX_POINTS` lots a dot is a (bin, class) group."""
    from truthsieve.pipeline.class_colours import class_colours

    values, majority = np.asarray(values, dtype=np.float64), np.asarray(majority)
    colours, k = class_colours(len(names)), len(names)
    low, span, sx, sy = _axes(values)
    parts = _frame(
        feature, "share of sources giving the majority class",
        [(sx(low + span * q / 4), f"{low + span * q / 4:.1f}") for q in range(5)],
        [(sy(q / 4), f"{q / 4:.2f}") for q in range(5)],
    )
    if len(values) > MAX_POINTS:
        edges = np.linspace(low, low + span, BINS + 1)
        group = np.clip(np.searchsorted(edges, values, side="right") - 1, 0, BINS - 1) * k + majority
        counts = np.bincount(group, minlength=BINS * k)
        sums = np.bincount(group, weights=share, minlength=BINS * k)
        centres = (edges[:-1] + edges[1:]) / 2
        points = [(centres[g // k], sums[g] / counts[g], g % k, 1.5 + 3.5 * np.sqrt(counts[g] / counts.max())) for g in np.flatnonzero(counts)]
        note = f"{len(values)} lots in {len(points)} (bin, class) groups, bins of width {span / BINS:.3g}"
    else:
        points = [(v, s, c, 2.6) for v, s, c in zip(values, share, majority)]
        note = f"{len(values)} lots, one dot each"
    for v, y, c, r in points:
        parts.append(
            f"<circle cx='{sx(v):.1f}' cy='{sy(y):.1f}' r='{r:.1f}' fill='{colours[int(c)]}' fill-opacity='0.8' stroke='{P['ink']}' stroke-width='0.4'/>"
        )
    parts.append(f"<text x='{PAD + 4}' y='{PAD - 12}' font-size='10' id='feature-plot-note'>{e(note)}</text>")
    legend_x = PAD + 8  # bottom left: a majority share is at least 1/K, so that corner is mostly empty
    parts.append(f"<rect x='{legend_x - 4}' y='{H - PAD - 14 * k - 18}' width='104' height='{14 * k + 8}' fill='{P['panel']}' stroke='{P['line']}'/>")
    for row, (name, colour) in enumerate(zip(names, colours)):
        y = H - PAD - 14 * (k - row) - 4
        parts.append(f"<rect x='{legend_x}' y='{y - 8}' width='10' height='10' fill='{colour}' stroke='{P['ink']}' stroke-width='0.6'/>")
        parts.append(f"<text x='{legend_x + 14}' y='{y + 1}' font-size='10' class='class-legend'>{e(name)} ({row})</text>")
    _cut_lines(parts, sx, cuts)
    return _svg(parts, f"{feature}: majority class of each lot and its share, with the cuts")


def history_strip(recent: Sequence[Mapping], decision: Decision) -> str:
    """A table: one row per source, one column per night (the earlier nights given, as
    :func:`~truthsieve.pipeline.report_history.night_brief` gives them, then tonight): each
    cell holds that night's flags as chips, or quarantined / absent; the header row carries
    each night's route."""
    from truthsieve.pipeline.evidence import FLAG_NAMES
    from truthsieve.pipeline.report_history import night_brief
    from truthsieve.pipeline.report_html import chip, route_badge

    nights = [*recent, night_brief(decision)]

    sources = sorted({s for n in nights for s in [*n["flags"], *n["quarantined"], *n["absent"]]})
    headers = ["source", *(n["batch_date"][5:] for n in nights)]
    rows = [["route", *(route_badge(n["route"]) if n["route"] else "&ndash;" for n in nights)]]
    for source in sources:
        cells = []
        for n in nights:
            if source in n["quarantined"]:
                cells.append(chip("quarantined", "faint"))
            elif source in n["absent"]:
                cells.append(chip("absent", "faint"))
            elif source not in n["flags"]:
                cells.append("")
            else:
                cells.append("".join(chip(FLAG_NAMES.get(c, c), title=c) for c in n["flags"][source]) or chip("clear", "calm"))
        rows.append([e(source), *cells])
    return table(headers, rows, text_columns=tuple(range(len(headers))))
