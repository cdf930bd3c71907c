"""The demo's strategic member pulls the fit on the nights it lies, and only it does."""

from __future__ import annotations

import pytest

from truthsieve.pipeline import demo
from truthsieve.pipeline.screen import decide, ingest_batch


@pytest.fixture(scope="module")
def demo_inbox(tmp_path_factory):
    inbox = tmp_path_factory.mktemp("demo-inbox")
    return inbox, demo.generate_inbox(inbox)


@pytest.mark.parametrize("night", [demo.STRATEGIC_FROM - 1, demo.STRATEGIC_FROM, demo.STRATEGIC_FROM + 1])
def test_strategic_member_gets_the_largest_pull_when_it_lies(demo_inbox, night, monkeypatch):
    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    inbox, dates = demo_inbox
    config = demo.demo_config()
    decision, _, _ = decide(ingest_batch(inbox, dates[night - 1], config), config, {})
    pulls = {s["source_id"]: s["pull"] for s in decision["sources"]}
    flags = {s["source_id"]: s["flags"] for s in decision["sources"]}
    # Default mode: whatever the flags, the route is aggregate (nothing a report can trip).
    assert config.routing.mode == "strategy_proof"
    assert decision["route"] == "aggregate"
    if night < demo.STRATEGIC_FROM:
        assert "pulls_fit" not in flags[demo.STRATEGIC]
        assert max(pulls.values()) < config.routing.max_pull
    else:
        others = [p for s, p in pulls.items() if s != demo.STRATEGIC]
        assert pulls[demo.STRATEGIC] > max(others)
        assert pulls[demo.STRATEGIC] >= config.routing.max_pull
        assert {"pulls_fit", "rule_shaped"} <= set(flags[demo.STRATEGIC])
        assert decision["consensus"]["rule"]["cut"] > demo.MOISTURE_LIMIT + 1  # the lie moved the cut
