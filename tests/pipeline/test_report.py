"""The batch report and the history page: content matches decision.json, escaping, real rendering."""

from __future__ import annotations

import json
import shutil
import subprocess
from html.parser import HTMLParser

import pytest

from inboxes import cli, write_batch, write_config
from truthsieve.pipeline.report import render_index, render_report

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
    decision = {
        "batch_date": DATE, "route": "review", "tool_version": "x", "consensus": None, "mechanism": None, "draw": None,
        "sources": [], "items_needed": None, "n_items": None, "quarantined": [{"source_id": hostile, "files": [hostile]}],
        "reasons": [{"code": "source_quarantined", "message": hostile, "blocking": True, "source_id": hostile}],
        "inputs": [{"path": f"batch_date={DATE}/source_id=x/{hostile}.parquet", "sha256": "0" * 64, "rows": 1, "valid": False, "source_id": hostile}],
        "errors": [{"file": hostile, "row": 1, "column": hostile, "rule": "label_out_of_range", "message": hostile}],
    }
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
