"""The real command line on generated inboxes: routes, reruns, concurrency, crashes, demo."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from inboxes import checksums, cli, write_batch, write_config
from truthsieve.pipeline import demo

DATE = "2026-11-03"


def screen_args(inbox: Path, config: Path, out: Path, date: str = DATE) -> list[str]:
    return ["screen", "--inbox", str(inbox), "--date", date, "--config", str(config), "--out", str(out)]


def test_both_routes_are_reached_and_outputs_match_the_route(tmp_path):
    # guarded mode: a flag sends the night to review (strategy_proof mode would aggregate)
    config = write_config(tmp_path / "c.yaml", routing={"mode": "guarded"})
    honest, bent = tmp_path / "honest", tmp_path / "bent"
    write_batch(honest, DATE, seed=1)
    write_batch(bent, DATE, seed=1, bend={"south": 16.0})
    for inbox, route in ((honest, "aggregate"), (bent, "review")):
        out = tmp_path / f"out-{route}"
        before = checksums(inbox)
        result = cli(*screen_args(inbox, config, out))
        assert result.returncode == 0, result.stderr
        assert checksums(inbox) == before
        batch = out / f"batch_date={DATE}"
        decision = json.loads((batch / "decision.json").read_text())
        assert decision["route"] == route
        assert (batch / "aggregate.parquet").exists() == (route == "aggregate")
        assert (batch / "review.json").exists() == (route == "review")
        assert pq.read_table(batch / "sources.parquet").num_rows == 4
        if route == "aggregate":
            aggregate = pq.read_table(batch / "aggregate.parquet").to_pydict()
            assert len(aggregate["item_id"]) == 120 and set(aggregate["label"]) <= {0, 1}
        else:
            south = next(s for s in decision["sources"] if s["source_id"] == "south")
            assert "rule_shaped" in south["flags"]
        assert f"route {route.upper()}" in result.stdout


def test_rerun_gives_byte_identical_decision(tmp_path):
    inbox, config = tmp_path / "inbox", write_config(tmp_path / "c.yaml")
    write_batch(inbox, DATE, seed=2, bend={"east": 15.5})
    names = ("decision.json", "sources.parquet", "report.html", "alerts.json")
    batch_a, batch_b = tmp_path / "a" / f"batch_date={DATE}", tmp_path / "b" / f"batch_date={DATE}"
    assert cli(*screen_args(inbox, config, tmp_path / "a")).returncode == 0
    first = {name: (batch_a / name).read_bytes() for name in names}  # kept before the rerun replaces them
    assert cli(*screen_args(inbox, config, tmp_path / "a")).returncode == 0
    second = {name: (batch_a / name).read_bytes() for name in names}
    assert cli(*screen_args(inbox, config, tmp_path / "b")).returncode == 0
    other_place = {name: (batch_b / name).read_bytes() for name in names}
    assert first == second == other_place
    east = next(s for s in json.loads(first["decision.json"])["sources"] if s["source_id"] == "east")
    assert east["flags"]  # the bent source makes it a non-trivial night


def test_draw_key_changes_the_draw_but_not_the_analysis(tmp_path):
    inbox, config = tmp_path / "inbox", write_config(tmp_path / "c.yaml")
    write_batch(inbox, DATE, seed=3)
    env = {**os.environ, "TRUTHSIEVE_DRAW_KEY": "a-real-secret"}
    cli(*screen_args(inbox, config, tmp_path / "demo-key"), env={k: v for k, v in env.items() if k != "TRUTHSIEVE_DRAW_KEY"})
    cli(*screen_args(inbox, config, tmp_path / "secret"), env=env)
    a = json.loads((tmp_path / "demo-key" / f"batch_date={DATE}" / "decision.json").read_text())
    b = json.loads((tmp_path / "secret" / f"batch_date={DATE}" / "decision.json").read_text())
    assert a["draw"]["key_source"] == "demo" and b["draw"]["key_source"] == "environment"
    assert a["draw"]["u"] != b["draw"]["u"] and a["draw"]["key_fingerprint"] != b["draw"]["key_fingerprint"]
    assert "a-real-secret" not in json.dumps(b)
    assert a["mechanism"] == b["mechanism"] and a["sources"] == b["sources"]
    assert any(r["code"] == "demo_draw_key" for r in a["reasons"]) and not any(r["code"] == "demo_draw_key" for r in b["reasons"])


def test_two_concurrent_runs_of_one_date_leave_one_consistent_result(tmp_path):
    inbox, config, out = tmp_path / "inbox", write_config(tmp_path / "c.yaml"), tmp_path / "out"
    write_batch(inbox, DATE, seed=4, n_items=3000)
    command = [sys.executable, "-m", "truthsieve.pipeline.cli", *screen_args(inbox, config, out)]
    runs = [subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE) for _ in range(2)]
    assert [r.wait(timeout=300) for r in runs] == [0, 0]
    batch = out / f"batch_date={DATE}"
    assert sorted(p.name for p in batch.iterdir()) == sorted(
        ["aggregate.parquet", "alerts.json", "decision.json", "report.html", "sources.parquet"]
    )
    reference = cli(*screen_args(inbox, config, tmp_path / "alone"))
    assert reference.returncode == 0
    assert (batch / "decision.json").read_bytes() == (tmp_path / "alone" / f"batch_date={DATE}" / "decision.json").read_bytes()
    assert not any((out / ".staging").iterdir())


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    result = cli("demo", "--out", str(out))
    assert result.returncode == 0, result.stderr
    return out, result


def test_demo_backfills_fourteen_nights_and_prints_where_to_look(demo_run):
    out, result = demo_run
    dates = demo.night_dates()
    assert sorted(p.name for p in out.glob("batch_date=*")) == [f"batch_date={d}" for d in dates]
    assert "14 nights screened" in result.stdout
    assert f"last report: {out / f'batch_date={dates[-1]}' / 'report.html'}" in result.stdout
    assert f"history:     {out / 'index.html'}" in result.stdout
    routes = [json.loads((out / f"batch_date={d}" / "decision.json").read_text())["route"] for d in dates]
    # strategy_proof routing: review only for the late re-screen (draw_revised) and the storm night (too_few_sources)
    assert [k for k, r in enumerate(routes, start=1) if r == "review"] == [demo.ABSENT_NIGHT, demo.STORM_NIGHT]
    broken = json.loads((out / f"batch_date={dates[demo.BROKEN_NIGHT - 1]}" / "decision.json").read_text())
    assert [q["source_id"] for q in broken["quarantined"]] == [demo.BROKEN]


def test_demo_flags_the_strategic_member_and_tells_the_careless_one_apart(demo_run):
    out, _ = demo_run
    last = json.loads((out / f"batch_date={demo.night_dates()[demo.STORM_NIGHT - 2]}" / "decision.json").read_text())  # the last full night
    flags = {s["source_id"]: set(s["flags"]) for s in last["sources"]}
    pulls = {s["source_id"]: s["pull"] for s in last["sources"]}
    assert max(pulls, key=pulls.get) == demo.STRATEGIC
    assert "rule_shaped" in flags[demo.STRATEGIC]
    assert flags[demo.CARELESS] and "rule_shaped" not in flags[demo.CARELESS]
    assert flags[demo.STRATEGIC] != flags[demo.CARELESS]
    honest = [s for s, _, _ in demo.GRADERS if s not in (demo.STRATEGIC, demo.CARELESS)]
    # Honest members look far from a consensus the strategic member moved, but none follows
    # one cut exactly (a heavy honest member such as the lab may show pull: without it the
    # strategic member would carry the fit; its pull stays below the strategic member's).
    assert all("rule_shaped" not in flags[s] for s in honest if s in flags)
    assert "pulls_fit" in flags[demo.STRATEGIC]
    first_bent = json.loads((out / f"batch_date={demo.night_dates()[demo.STRATEGIC_FROM - 1]}" / "decision.json").read_text())
    cedar = next(s for s in first_bent["sources"] if s["source_id"] == demo.STRATEGIC)
    assert "drift_positive_rate" in cedar["flags"]


def test_backfill_rerun_of_a_past_night_is_identical(demo_run, tmp_path):
    out, _ = demo_run
    inbox = out.with_name(out.name + "-inbox")
    date = demo.night_dates()[demo.STORM_NIGHT - 2]  # its drift window does not reach the late-delivered night
    before = (out / f"batch_date={date}" / "decision.json").read_bytes()
    config = tmp_path / "demo.yaml"
    config.write_text(json.dumps(demo.demo_config_dict()))
    result = cli("backfill", "--inbox", str(inbox), "--from", date, "--to", date, "--config", str(config), "--out", str(out))
    assert result.returncode == 0, result.stderr
    assert (out / f"batch_date={date}" / "decision.json").read_bytes() == before


def test_checked_in_demo_config_is_the_one_the_demo_uses():
    import yaml

    root = Path(__file__).resolve().parents[2]
    assert yaml.safe_load((root / "config" / "demo.yaml").read_text()) == demo.demo_config_dict()
