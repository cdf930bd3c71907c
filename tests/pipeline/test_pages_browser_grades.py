"""The grades demo's report in headless Chromium (the pattern of test_pages_browser.py): no
console error, no page scrolling sideways, no clipped table, the class legend in the DOM."""

from __future__ import annotations

import json
import re

import pytest

from inboxes import cli
from test_pages_browser import BROWSER, MEASURE, chromium

pytestmark = pytest.mark.browser


@pytest.mark.parametrize("width", [1280, 800])
def test_the_grades_report_renders_with_every_class_in_its_legend(tmp_path, width):
    if BROWSER is None:
        pytest.skip("chromium is not installed (CI installs it)")
    out = tmp_path / "out"
    result = cli("demo", "--scenario", "grades", "--out", str(out))
    assert result.returncode == 0, result.stderr
    source = out / "batch_date=2026-12-09" / "report.html"
    shot = tmp_path / f"grades-{width}.png"
    rendered = chromium(f"--window-size={width},1400", f"--screenshot={shot}", source.as_uri(), profile=tmp_path / "p1")
    print(f"screenshot: {shot}")
    assert shot.is_file(), rendered.stderr[-2000:]
    assert "Uncaught" not in rendered.stderr and "CONSOLE" not in rendered.stderr, rendered.stderr[-2000:]
    probe = source.with_name("measure.html")
    probe.write_text(source.read_text().replace("</body>", MEASURE + "</body>"))
    dom = chromium(f"--window-size={width},1400", "--virtual-time-budget=5000", "--dump-dom", probe.as_uri(), profile=tmp_path / "p2").stdout
    probe.unlink()
    found = re.search(r"<pre id=\"measured\">(.*?)</pre>", dom, re.S)
    assert found, dom[-500:]
    measured = json.loads(found.group(1).replace("&quot;", '"').replace("&amp;", "&"))
    page_width, window = measured["page"]
    assert page_width <= window
    for t in measured["tables"]:
        assert t["table"] <= t["box"] or t["scrolls"], f"table {t['k']} is clipped: {t}"
    for k, name in enumerate(["reject", "feed", "milling", "premium"]):
        assert f">{name} ({k})</text>" in dom
