"""The batch report and the history page: content matches decision.json, escaping, real rendering."""

from __future__ import annotations

import json
import shutil
import subprocess
from html.parser import HTMLParser

import pytest

from decision_support import fitted, source_entry, typed_decision
from inboxes import cli, write_batch, write_config
from truthsieve.pipeline.decision import Absent, InputRecord, Quarantined, decision_from_json
from truthsieve.pipeline.layout import Note
from truthsieve.pipeline.records import ErrorRecord
from truthsieve.pipeline.report import render_index, render_report
from truthsieve.pipeline.routing import Reason

DATE = "2026-11-03"


class Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.text, self.tags, self._current = {}, [], [], None

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        attributes = dict(attrs)
        if "id" in attributes:
            self._current = attributes["id"]
            self.ids[self._current] = ""

    def handle_data(self, data):
        self.text.append(data)
        if self._current:
            self.ids[self._current] += data

    def handle_endtag(self, tag):
        self._current = None


@pytest.fixture(scope="module")
def screened(tmp_path_factory):
    root = tmp_path_factory.mktemp("report")
    inbox, out = root / "inbox", root / "out"
    write_batch(inbox, DATE, seed=11, bend={"south": 16.0})
    result = cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(write_config(root / "c.yaml")), "--out", str(out))
    assert result.returncode == 0, result.stderr
    batch = out / f"batch_date={DATE}"
    return out, batch, json.loads((batch / "decision.json").read_text())


def test_report_has_every_section_and_the_decisions_numbers(screened):
    _, batch, decision = screened
    page = Collector()
    page.feed((batch / "report.html").read_text())
    for section in ("route", "summary", "decided", "in-force-now", "next-step", "who-pulled", "reasons", "rules", "feature-plot", "sources", "pull-chart", "history", "lottery", "draw", "inputs", "to-index"):
        assert section in page.ids, section
    assert page.ids["route"] == decision["route"]
    assert float(page.ids["ratio"]) == pytest.approx(decision["mechanism"]["ratio"], abs=5e-5)
    assert float(page.ids["draw-u"]) == decision["draw"]["u"]
    assert int(page.ids["items-needed"]) == decision["items_needed"]
    text = " ".join(page.text)
    for source in decision["sources"]:
        assert source["source_id"] in text
        assert f"{source['disagreement']:.4f}" in text
    for entry in decision["inputs"]:
        assert entry["sha256"] in text
    assert "licensed graders prevail" in text
    assert "script" not in page.tags and "http://" not in (batch / "report.html").read_text().replace("http://www.w3.org/2000/svg", "")


def test_hostile_strings_are_escaped():
    hostile = "<script>alert(1)</script>"
    unfitted = typed_decision(
        batch_date=DATE, route="review", quarantined=[Quarantined(hostile, (hostile,))],
        reasons=[Reason("source_quarantined", hostile, True, hostile)],
        inputs=[InputRecord(f"batch_date={DATE}/source_id=x/{hostile}.parquet", "0" * 64, 1, False, hostile)],
        errors=[ErrorRecord(hostile, 1, hostile, "label_out_of_range", hostile)],
        absent=[Absent(hostile, "no_folder")], notes=[Note("stray_file", hostile, hostile)],
    )
    drawn = fitted(source_id=hostile, batch_date=DATE, sources=[source_entry(hostile, flags=["pulls_fit"], pull=0.05)])
    for decision in (unfitted, drawn):
        for page in (render_report(decision), render_index([decision])):
            assert hostile not in page
            assert "&lt;script&gt;" in page


@pytest.mark.browser
def test_pages_render_in_headless_chromium(screened, tmp_path):
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("chromium is not installed (.ci/run installs it)")
    out, batch, _ = screened
    (out / "index.html").exists() or pytest.fail("the CLI writes index.html")
    for page in (batch / "report.html", out / "index.html"):
        shot = tmp_path / f"{page.stem}.png"
        result = subprocess.run(
            [browser, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
             "--disable-component-update", "--disable-sync", f"--user-data-dir={tmp_path / ('profile-' + page.stem)}",
             "--enable-logging=stderr", "--v=0", "--window-size=1280,1600", f"--screenshot={shot}", page.as_uri()],
            capture_output=True, text=True, timeout=120,
        )
        assert shot.is_file() and shot.stat().st_size > 10_000, result.stderr[-2000:]
        assert "Uncaught" not in result.stderr and "CONSOLE" not in result.stderr
        from PIL import Image

        image = Image.open(shot).convert("L")
        low, high = image.getextrema()
        assert high - low > 100  # not a blank page


def _review_copy(decision):
    from dataclasses import replace

    return replace(decision, route="review", reasons=(*decision.reasons, Reason("too_few_sources", "only 3 valid sources; the policy needs 4", True)))


def test_a_review_night_never_presents_its_drawn_rule_as_applied(screened):
    from pathlib import Path

    from truthsieve.pipeline.cli import summary
    from truthsieve.pipeline.report_html import rule_text

    decision = decision_from_json(screened[2])
    assert decision.route == "aggregate"
    review = _review_copy(decision)
    before = {"rule": {"kind": "threshold", "feature": "moisture_pct", "cut": 14.25, "above": 0}, "since": "2026-11-01"}
    import html
    import re

    markup = render_report(review, None, before)

    def text(name):
        found = re.search(rf"<p id='{name}'>(.*?)</p>", markup, re.S)
        return html.unescape(re.sub("<[^>]+>", "", found.group(1)))

    drawn = rule_text(review.draw.rule)
    assert "would apply if approved" in text("decided") and drawn in text("decided")
    assert "published" not in text("decided")
    # the rule in force is the one before the night (hand-made above), with its date
    assert "moisture_pct > 14.25: reject; otherwise accept" in text("in-force-now") and "2026-11-01" in text("in-force-now")
    assert f"truthsieve verdict --out OUT --date {DATE}" in text("next-step")
    line = next(x for x in summary(review, Path("o")).splitlines() if x.strip().startswith("drawn"))
    assert "would apply if approved; not in force" in line
    line = next(x for x in summary(decision, Path("o")).splitlines() if x.strip().startswith("drawn"))
    assert "in force from tonight" in line


def test_feature_plot_bins_many_lots_and_says_so():
    import numpy as np

    from truthsieve.pipeline.report_charts import BINS, MAX_POINTS, feature_plot

    rng = np.random.default_rng(5)
    n = 1_000_000  # 10M labels at 10 sources
    svg = feature_plot(rng.normal(14, 2, n), rng.random(n), "moisture_pct", {"consensus fit": 14.05, "drawn": 14.55})
    assert len(svg.encode()) < 50_000  # the whole report stays far below 2 MB: nothing else grows with the lots
    assert svg.count("<circle") <= BINS and f"{n} lots in" in svg and "bins" in svg
    few = feature_plot(rng.normal(14, 2, MAX_POINTS), rng.random(MAX_POINTS), "moisture_pct", {"consensus fit": None, "drawn": None})
    assert few.count("<circle") == MAX_POINTS and "one dot each" in few


def test_history_strip_shows_each_nights_route_flags_quarantine_and_absence():
    from truthsieve.pipeline.report_charts import history_strip

    recent = [
        {"batch_date": "2026-11-01", "route": "aggregate", "flags": {"a": ["pulls_fit"], "b": []}, "quarantined": [], "absent": ["c"]},
        {"batch_date": "2026-11-02", "route": "review", "flags": {"a": []}, "quarantined": ["b"], "absent": []},
    ]
    tonight = typed_decision(batch_date="2026-11-03", route="aggregate", sources=[source_entry("a", flags=["rule_shaped"]), source_entry("c")],
                             absent=[Absent("b", "no_folder")])
    rows = [r.split("</td>") for r in history_strip(recent, tonight).split("<tr>")[2:]]
    cells = {r[0].rsplit(">", 1)[-1]: r[1:4] for r in rows}
    assert "review" in cells["route"][1] and "aggregate" in cells["route"][2]
    assert "pull high" in cells["a"][0] and "clear" in cells["a"][1] and "one-cut fit" in cells["a"][2]
    assert "clear" in cells["b"][0] and "quarantined" in cells["b"][1] and "absent" in cells["b"][2]
    assert "absent" in cells["c"][0] and cells["c"][1].endswith("<td class='t'>") and "clear" in cells["c"][2]


def test_the_summary_reads_every_part_of_a_hand_made_decision():
    from pathlib import Path

    from truthsieve.pipeline.cli import summary

    decision = fitted(
        route="aggregate", reasons=[Reason("source_flagged", "farm-cedar: pulls the fit", False, "farm-cedar")],
        sources=[source_entry("farm-cedar", flags=["pulls_fit", "rule_shaped"]), source_entry("coop-lab")],
        quarantined=[Quarantined("farm-birch", ("a.parquet", "b.parquet")), Quarantined(None, ("items.parquet",))],
    )
    # decision_support.fitted: one lottery entry (source "a", p = 1, risk 0.1), u = 0.5, ratio 1, guarantee 1;
    # RULE is moisture_pct > 14.05 with above 0 (reject), below 1 (accept); "a" is padded to 14 characters.
    assert summary(decision, Path("o")).splitlines() == [
        "batch 2026-11-03: route AGGREGATE",
        "  - [source_flagged] farm-cedar: pulls the fit",
        "  consensus: moisture_pct > 14.05: reject; otherwise accept (risk 0.1000)",
        "  tuned_dictator: 1 entries, expected risk 0.1000, ratio 1.000 (guarantee 1.000)",
        "      p=1.000  a              moisture_pct > 14.05: reject; otherwise accept",
        "  drawn (u=0.500000, in force from tonight): a: moisture_pct > 14.05: reject; otherwise accept",
        "  flagged: farm-cedar (pulls_fit, rule_shaped)",
        "  quarantined: farm-birch: 2 file(s)",
        "  quarantined: items table: 1 file(s)",
        "  outputs: o",
    ]
    nothing = typed_decision(reasons=[Reason("no_items", "no items table", True)])
    assert summary(nothing, Path("o")).splitlines() == ["batch 2026-11-03: route REVIEW", "  ! [no_items] no items table", "  flagged: none", "  outputs: o"]


def test_the_sources_section_and_the_index_read_the_typed_sources():
    import html
    import re

    bent = source_entry("farm-cedar", flags=["pulls_fit"], pull=0.0412, disagreement=0.3, disagreement_interval=(0.25, 0.35),
                        gain_lower=0.01, gain_upper=0.03, gain_exact=False, weight=2.0, items=320, kappa=0.5, balanced_accuracy=0.75)
    lesser = source_entry("farm-alder", flags=["pulls_fit"], pull=0.03)
    decision = fitted(source_id="farm-cedar", route="aggregate", sources=[bent, source_entry("coop-lab"), lesser], absent=[Absent("farm-elm", "no_folder")])
    markup = render_report(decision)
    assert "the strategy-proof lottery drew farm-cedar's rule" in markup
    assert "farm-cedar pulled the fit most: pull <span id='top-pull'>0.0412</span>" in markup  # the larger of 0.0412 and 0.03
    section = markup[markup.index("<h2 id='sources'>"):markup.index("<h3 id='pull-chart'>")]
    row = [html.unescape(re.sub("<[^>]+>", "", c)) for c in section.split("<tr>")[2].split("</td>")[:-1]]
    # f() prints 4 decimals by default, 3 where asked (weight, interval ends, kappa, balanced accuracy)
    assert row == ["farm-cedar", "2.000", "320", "0.3000 [0.250, 0.350]", "0.1000", "0.0100\u20130.0300 (bound)", "0.0412", "0.500", "0.750", "pull high"]
    index = render_index([decision])
    assert "farm-cedar <span class='pull nowrap'>0.0412</span>" in index  # who pulled the fit most (0.0412 > 0.03)
    assert "farm-elm: <span class='chip faint'>absent</span>" in index
