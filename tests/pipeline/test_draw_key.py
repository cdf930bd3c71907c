"""The draw key is read at the edges only: the command line and the Airflow operator."""

from __future__ import annotations

import json

from inboxes import write_batch, write_config
from truthsieve.core.draw import DEMO_DRAW_KEY, key_fingerprint
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.screen import draw_key_from_environment, screen

DATE = "2026-11-03"


def test_below_the_edges_nothing_reads_the_environment(tmp_path, monkeypatch):
    write_batch(tmp_path / "inbox", DATE, seed=4)
    config = load_config(write_config(tmp_path / "c.yaml"))
    monkeypatch.setenv("TRUTHSIEVE_DRAW_KEY", "set-but-not-passed")
    implicit = screen(tmp_path / "inbox", DATE, config, tmp_path / "a").decision["draw"]
    assert implicit["key_source"] == "demo" and implicit["key_fingerprint"] == key_fingerprint(DEMO_DRAW_KEY)
    passed = screen(tmp_path / "inbox", DATE, config, tmp_path / "b", draw_key=("a-secret", False)).decision["draw"]
    assert passed["key_source"] == "environment" and passed["key_fingerprint"] == key_fingerprint("a-secret")
    assert "a-secret" not in json.dumps(passed)


def test_the_edge_reads_the_variable_or_falls_back_to_the_demo_key():
    assert draw_key_from_environment({"TRUTHSIEVE_DRAW_KEY": "k"}) == ("k", False)
    assert draw_key_from_environment({}) == (DEMO_DRAW_KEY, True)
    assert draw_key_from_environment({"TRUTHSIEVE_DRAW_KEY": ""}) == (DEMO_DRAW_KEY, True)
