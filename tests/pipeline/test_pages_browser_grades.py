"""The grades demo's report in headless Chromium (the pattern of test_pages_browser.py): no
console error, no page scrolling sideways, no clipped table, the class legend in the DOM."""

from __future__ import annotations

import pytest

from inboxes import cli
from test_pages_browser import BROWSER, render_and_measure

pytestmark = pytest.mark.browser


@pytest.mark.parametrize("width", [1280, 800])
def test_the_grades_report_renders_with_every_class_in_its_legend(tmp_path, width):
    if BROWSER is None:
        pytest.skip("chromium is not installed (CI installs it)")
    out = tmp_path / "out"
    result = cli("demo", "--scenario", "grades", "--out", str(out))
    assert result.returncode == 0, result.stderr
    source = out / "batch_date=2026-12-09" / "report.html"
    measured, dom = render_and_measure(source, width, tmp_path, "grades")
    page_width, window = measured["page"]
    assert page_width <= window
    for t in measured["tables"]:
        assert t["table"] <= t["box"] or t["scrolls"], f"table {t['k']} is clipped: {t}"
    for k, name in enumerate(["reject", "feed", "milling", "premium"]):
        assert f">{name} ({k})</text>" in dom
