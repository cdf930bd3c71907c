"""The demo's pages in headless Chromium: screenshots at 1280 and 800 px (kept under the
test's temporary folder, paths printed), no clipped table, no console error, not blank;
the report printed to PDF has no page whose only content is a heading; the pages' numbers
equal decision.json's."""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from html.parser import HTMLParser

import pytest

from inboxes import cli
from truthsieve.pipeline import demo

BROWSER = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = pytest.mark.browser

# Measures every table against its box, the page against the window, and whether any
# date or badge wrapped; writes the result into the DOM for --dump-dom to return.
MEASURE = """<script>
window.addEventListener('load', function () {
  var out = {tables: [], page: [document.documentElement.scrollWidth, document.documentElement.clientWidth], wrapped: []};
  document.querySelectorAll('table').forEach(function (t, k) {
    var box = t.parentElement, style = getComputedStyle(box).overflowX;
    out.tables.push({k: k, table: t.scrollWidth, box: box.clientWidth, scrolls: style === 'auto' || style === 'scroll',
                     right: t.getBoundingClientRect().right, window: window.innerWidth});
  });
  document.querySelectorAll('td.nowrap a, .route').forEach(function (n) {
    if (n.getClientRects().length > 1) out.wrapped.push(n.textContent);
  });
  var pre = document.createElement('pre'); pre.id = 'measured'; pre.textContent = JSON.stringify(out);
  document.body.appendChild(pre);
});
</script>"""


def chromium(*args, profile, timeout=180):
    base = [BROWSER, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
            "--disable-component-update", "--disable-sync", "--hide-scrollbars", f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0"]
    return subprocess.run([*base, *args], capture_output=True, text=True, timeout=timeout)


def render_and_measure(source, width: int, tmp_path, name: str = "page") -> tuple[dict, str]:
    """Screenshot ``source`` (not blank, no console error), then the sizes MEASURE reports and the DOM.

    The measured copy sits beside the original, so relative links stay the same.
    """
    from PIL import Image

    shot = tmp_path / f"{name}-{width}.png"
    result = chromium(f"--window-size={width},1400", f"--screenshot={shot}", source.as_uri(), profile=tmp_path / "p1")
    print(f"screenshot: {shot}")
    assert shot.is_file(), result.stderr[-2000:]
    assert "Uncaught" not in result.stderr and "CONSOLE" not in result.stderr, result.stderr[-2000:]
    low, high = Image.open(shot).convert("L").getextrema()
    assert high - low > 100  # not blank
    probe = source.with_name(f"measure-{name}-{width}.html")
    probe.write_text(source.read_text().replace("</body>", MEASURE + "</body>"))
    dom = chromium(f"--window-size={width},1400", "--virtual-time-budget=5000", "--dump-dom", probe.as_uri(), profile=tmp_path / "p2").stdout
    probe.unlink()
    found = re.search(r"<pre id=\"measured\">(.*?)</pre>", dom, re.S)
    assert found, dom[-500:]
    return json.loads(found.group(1).replace("&quot;", '"').replace("&amp;", "&")), dom


@pytest.fixture(scope="module")
def demo_out(tmp_path_factory):
    if BROWSER is None:
        pytest.skip("chromium is not installed (CI installs it)")
    out = tmp_path_factory.mktemp("pages") / "out"
    result = cli("demo", "--out", str(out))
    assert result.returncode == 0, result.stderr
    dates = demo.night_dates()
    pages = {
        "aggregate": out / f"batch_date={dates[demo.STRATEGIC_FROM]}" / "report.html",
        "review": out / f"batch_date={dates[demo.STORM_NIGHT - 1]}" / "report.html",
        "quarantine": out / f"batch_date={dates[demo.BROKEN_NIGHT - 1]}" / "report.html",
        "index": out / "index.html",
    }
    return out, pages


@pytest.mark.parametrize("width", [1280, 800])
@pytest.mark.parametrize("name", ["aggregate", "review", "quarantine", "index"])
def test_page_renders_unclipped_without_errors(demo_out, name, width, tmp_path):
    _, pages = demo_out
    source = pages[name]
    measured, _ = render_and_measure(source, width, tmp_path, name)
    page_width, window = measured["page"]
    assert page_width <= window, f"the page itself scrolls sideways: {page_width} > {window}"
    assert measured["tables"], "no table measured"
    for t in measured["tables"]:
        assert t["table"] <= t["box"] or t["scrolls"], f"table {t['k']} is clipped: {t}"
        assert t["box"] <= window
    assert not measured["wrapped"], f"dates or badges wrapped: {measured['wrapped']}"


@pytest.mark.parametrize("name", ["aggregate", "review", "quarantine"])
def test_printed_report_has_no_page_holding_only_a_heading(demo_out, name, tmp_path):
    if shutil.which("pdftotext") is None:
        pytest.skip("pdftotext (poppler-utils) is not installed")
    _, pages = demo_out
    pdf = tmp_path / f"{name}.pdf"
    result = chromium("--no-pdf-header-footer", f"--print-to-pdf={pdf}", pages[name].as_uri(), profile=tmp_path / "p")
    assert pdf.is_file(), result.stderr[-2000:]
    print(f"pdf: {pdf}")
    headings = HeadingCollector()
    headings.feed(pages[name].read_text())
    text = subprocess.run(["pdftotext", "-layout", str(pdf), "-"], capture_output=True, text=True, timeout=60).stdout
    sheets = [p for p in text.split("\f")]
    while sheets and not sheets[-1].strip():
        sheets.pop()
    assert len(sheets) >= 2
    for k, sheet in enumerate(sheets, start=1):
        lines = [line.strip() for line in sheet.splitlines() if line.strip()]
        assert lines, f"page {k} is empty"
        assert not all(line in headings.texts for line in lines), f"page {k} holds only the heading(s) {lines}"


class HeadingCollector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.texts, self._in = set(), False
        self._buffer = ""

    def handle_starttag(self, tag, attrs):
        if tag in ("h1", "h2", "h3"):
            self._in, self._buffer = True, ""

    def handle_endtag(self, tag):
        if tag in ("h1", "h2", "h3") and self._in:
            self.texts.add(" ".join(self._buffer.split()))
            self._in = False

    def handle_data(self, data):
        if self._in:
            self._buffer += data


class Ids(HTMLParser):
    def __init__(self):
        super().__init__()
        self.text, self.attrs, self._stack = {}, [], []

    def handle_starttag(self, tag, attrs):
        attributes = dict(attrs)
        self.attrs.append((tag, attributes))
        if "id" in attributes:
            self.text[attributes["id"]] = ""
        self._stack.append(attributes.get("id"))

    def handle_endtag(self, tag):
        if self._stack:
            self._stack.pop()

    def handle_data(self, data):
        for name in self._stack:
            if name:
                self.text[name] += data


def test_report_and_index_carry_the_rule_in_force_next_step_and_pull_chart_of_decision_json(demo_out):
    out, pages = demo_out
    decision = json.loads(pages["aggregate"].with_name("decision.json").read_text())
    report = Ids()
    report.feed(pages["aggregate"].read_text())
    from truthsieve.pipeline.report_html import rule_text

    drawn = rule_text(decision["draw"]["rule"])
    assert drawn in report.text["in-force-now"] and decision["batch_date"] in report.text["in-force-now"]
    assert "truthsieve apply --out OUT" in report.text["next-step"]
    marks = {a["data-source"]: a for tag, a in report.attrs if "data-pull" in a}
    assert set(marks) == {s["source_id"] for s in decision["sources"]}
    for s in decision["sources"]:
        assert float(marks[s["source_id"]]["data-pull"]) == s["pull"]
        assert float(marks[s["source_id"]]["data-disagreement"]) == s["disagreement"]
        assert f"{s['pull']:.4f}" in report.text["pull-legend"]
    top = max(decision["sources"], key=lambda s: s["pull"])
    assert float(report.text["top-pull"]) == pytest.approx(top["pull"], abs=5e-5)
    assert top["source_id"] in report.text["who-pulled"]

    review = Ids()
    review.feed(pages["review"].read_text())
    review_decision = json.loads(pages["review"].with_name("decision.json").read_text())
    assert "would apply if approved" in review.text["decided"]
    assert "in force" not in review.text["decided"].replace("not in force", "")
    assert f"truthsieve verdict --out OUT --date {review_decision['batch_date']}" in review.text["next-step"]

    index = Ids()
    index.feed(pages["index"].read_text())
    state = json.loads((out / "in_force.json").read_text())
    assert rule_text(state["rule"]) in index.text["in-force"] and state["since"] in index.text["in-force"]
    assert "truthsieve verdict" in index.text["next-step"]
    page_text = pages["index"].read_text()
    assert "went to review" in page_text and "delivered late" in page_text and "approved it" in page_text and "rejected it" in page_text
