"""Reviewers' verdicts end to end through the real command line.

Review nights come from ``routing.min_valid_sources`` above the four sources present: a
gate no source's labels can trip, so these nights go to review in every routing mode.
"""

from __future__ import annotations

import json
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from inboxes import cli, write_batch, write_config

AGGREGATED_NIGHT, APPROVED_NIGHT, REJECTED_NIGHT = "2026-11-02", "2026-11-03", "2026-11-04"


def screen(tmp: Path, date: str, config: Path) -> dict:
    result = cli("screen", "--inbox", str(tmp / "inbox"), "--date", date, "--config", str(config), "--out", str(tmp / "out"))
    assert result.returncode == 0, result.stderr
    return json.loads((tmp / "out" / f"batch_date={date}" / "decision.json").read_text())


def in_force(out: Path) -> dict:
    result = cli("in-force", "--out", str(out), "--json")
    assert result.returncode == 0, result.stderr
    return json.loads(result.stdout)


def one_line_error(result, *words) -> None:
    assert result.returncode == 2, (result.stdout, result.stderr)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in result.stderr, result.stderr
    for word in words:
        assert word in lines[0], lines[0]


@pytest.fixture(scope="module")
def nights(tmp_path_factory):
    """Night 1 aggregated, nights 2 and 3 sent to review (too few sources)."""
    tmp = tmp_path_factory.mktemp("verdicts")
    aggregate = write_config(tmp / "aggregate.yaml")
    review = write_config(tmp / "review.yaml", routing={"min_valid_sources": 9})
    write_batch(tmp / "inbox", AGGREGATED_NIGHT, seed=1)
    write_batch(tmp / "inbox", APPROVED_NIGHT, seed=2)
    write_batch(tmp / "inbox", REJECTED_NIGHT, seed=3, bend={"lab": 16.0, "north": 16.0, "south": 16.0, "east": 16.0})
    decisions = {
        AGGREGATED_NIGHT: screen(tmp, AGGREGATED_NIGHT, aggregate),
        APPROVED_NIGHT: screen(tmp, APPROVED_NIGHT, review),
        REJECTED_NIGHT: screen(tmp, REJECTED_NIGHT, review),
    }
    assert [d["route"] for d in decisions.values()] == ["aggregate", "review", "review"]
    return tmp, tmp / "out", decisions, review


def test_review_night_approve_apply_then_reject_keeps_the_rule(nights):
    tmp, out, decisions, _ = nights
    first, second, third = (decisions[d]["draw"]["rule"] for d in (AGGREGATED_NIGHT, APPROVED_NIGHT, REJECTED_NIGHT))
    assert first != second and second != third  # otherwise the test could not tell the rules apart

    before = in_force(out)
    assert before["rule"] == first and before["since"] == AGGREGATED_NIGHT

    result = cli("verdict", "--out", str(out), "--date", APPROVED_NIGHT, "--approve", "--by", "Wren Talbot", "--note", "lab checked")
    assert result.returncode == 0, result.stderr
    now = in_force(out)
    assert now["rule"] == second and now["since"] == APPROVED_NIGHT
    assert now["event"]["kind"] == "verdict" and now["event"]["by"] == "Wren Talbot"
    review = json.loads((out / f"batch_date={APPROVED_NIGHT}" / "review.json").read_text())
    assert review["status"] == "approved" and review["verdict"]["by"] == "Wren Talbot"

    # New lots around the approved cut: x > cut gets `above`, the rest the other label.
    assert second["kind"] == "threshold" and second["feature"] == "moisture_pct"
    cut, above = second["cut"], second["above"]
    below = 1 - above
    moisture = [cut - 2.0, cut, cut + 0.01, cut + 3.0]
    items = tmp / "new-lots.parquet"
    pq.write_table(pa.table({"item_id": ["a", "b", "c", "d"], "moisture_pct": moisture, "falling_number_s": [300.0] * 4}), items)
    result = cli("apply", "--out", str(out), "--items", str(items), "--write", str(tmp / "labelled.parquet"))
    assert result.returncode == 0, result.stderr
    labelled = pq.read_table(tmp / "labelled.parquet")
    assert labelled.column("item_id").to_pylist() == ["a", "b", "c", "d"]
    assert labelled.column("label").to_pylist() == [below, below, above, above]  # the cut itself is not "> cut"
    assert json.loads(labelled.column("rule")[0].as_py()) == second
    assert json.loads(labelled.schema.metadata[b"truthsieve.in_force"])["since"] == APPROVED_NIGHT

    result = cli("verdict", "--out", str(out), "--date", REJECTED_NIGHT, "--reject", "--by", "Wren Talbot", "--note", "bent grades")
    assert result.returncode == 0, result.stderr
    after = in_force(out)
    assert after["rule"] == second and after["since"] == APPROVED_NIGHT and after["seq"] == now["seq"]
    assert json.loads((out / f"batch_date={REJECTED_NIGHT}" / "review.json").read_text())["status"] == "rejected"

    # As of the first night, the ledger replays to the first night's rule.
    result = cli("apply", "--out", str(out), "--items", str(items), "--write", str(tmp / "old.parquet"), "--as-of", AGGREGATED_NIGHT)
    assert result.returncode == 0, result.stderr
    assert json.loads(pq.read_table(tmp / "old.parquet").column("rule")[0].as_py()) == first

    index = (out / "index.html").read_text()
    assert "approved by Wren Talbot" in index and "rejected by Wren Talbot" in index
    assert cli("ledger", "--out", str(out), "--verify").returncode == 0


def test_verdict_errors_exit_2_with_one_line(nights):
    tmp, out, _, _ = nights
    one_line_error(cli("verdict", "--out", str(out), "--date", "2026-10-01", "--approve", "--by", "Wren"), "2026-10-01", "no night")
    one_line_error(cli("verdict", "--out", str(out), "--date", AGGREGATED_NIGHT, "--reject", "--by", "Wren"), "not awaiting review", "aggregated")
    one_line_error(cli("verdict", "--out", str(out), "--date", APPROVED_NIGHT, "--approve", "--reject", "--by", "Wren"), "exactly one")
    one_line_error(cli("verdict", "--out", str(out), "--date", APPROVED_NIGHT, "--by", "Wren"), "exactly one")
    one_line_error(cli("verdict", "--out", str(out), "--date", APPROVED_NIGHT, "--approve", "--by", "  "), "--by")
    ledger = (out / "ledger.jsonl").read_bytes()
    one_line_error(cli("revoke", "--out", str(out), "--date", REJECTED_NIGHT, "--by", "Wren", "--note", "x"), "nothing to revoke")
    assert (out / "ledger.jsonl").read_bytes() == ledger  # refused commands append nothing


def test_decided_nights_refuse_a_second_verdict(nights):
    _, out, _, _ = nights
    for date in (APPROVED_NIGHT, REJECTED_NIGHT):
        result = cli("verdict", "--out", str(out), "--date", date, "--approve", "--by", "Someone Else")
        if result.returncode == 0:  # only when this test runs before the flow test
            continue
        one_line_error(result, "not awaiting review")


def test_rescreen_keeps_verdict_unless_the_night_changed_and_revoke_restores(tmp_path):
    review = write_config(tmp_path / "review.yaml", routing={"min_valid_sources": 9})
    aggregate = write_config(tmp_path / "aggregate.yaml")
    out = tmp_path / "out"
    write_batch(tmp_path / "inbox", AGGREGATED_NIGHT, seed=1)
    write_batch(tmp_path / "inbox", APPROVED_NIGHT, seed=2)
    first = screen(tmp_path, AGGREGATED_NIGHT, aggregate)["draw"]["rule"]
    second = screen(tmp_path, APPROVED_NIGHT, review)["draw"]["rule"]
    assert cli("verdict", "--out", str(out), "--date", APPROVED_NIGHT, "--approve", "--by", "Wren").returncode == 0

    screen(tmp_path, APPROVED_NIGHT, review)  # same inputs: byte-identical decision, the verdict stands
    assert in_force(out)["rule"] == second
    events = [json.loads(line)["event"] for line in (out / "ledger.jsonl").read_text().splitlines()]
    assert "changed_after_verdict" not in events

    write_batch(tmp_path / "inbox", APPROVED_NIGHT, seed=7)  # the night's labels change
    screen(tmp_path, APPROVED_NIGHT, review)
    entries = [json.loads(line) for line in (out / "ledger.jsonl").read_text().splitlines()]
    flagged = [e for e in entries if e["event"] == "changed_after_verdict"]
    assert len(flagged) == 1 and flagged[0]["date"] == APPROVED_NIGHT and flagged[0]["verdict"] == "approved"
    assert len([e for e in entries if e["event"] == "verdict"]) == 1  # the verdict line is still there
    assert in_force(out)["rule"] == first  # the changed night awaits a new verdict
    assert json.loads((out / f"batch_date={APPROVED_NIGHT}" / "review.json").read_text())["status"] == "awaiting_review"

    result = cli("revoke", "--out", str(out), "--date", AGGREGATED_NIGHT, "--by", "Wren", "--note", "farm flagged after publication")
    assert result.returncode == 0, result.stderr
    state = in_force(out)
    assert state["rule"] is None
    revoked = [json.loads(line) for line in (out / "ledger.jsonl").read_text().splitlines() if '"revoked"' in line]
    assert len(revoked) == 1 and "override" in revoked[0]["override"] and revoked[0]["by"] == "Wren"
    one_line_error(cli("revoke", "--out", str(out), "--date", AGGREGATED_NIGHT, "--by", "Wren", "--note", "again"), "nothing to revoke")


def test_demo_records_an_approval_and_a_rejection_and_ends_with_the_rule_in_force(tmp_path):
    out = tmp_path / "out"
    result = cli("demo", "--out", str(out))
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip().splitlines()[-3].startswith("rule in force:")
    index = (out / "index.html").read_text()
    assert "approved by Greta Voss (quality manager)" in index and "rejected by Greta Voss (quality manager)" in index
    state = in_force(out)
    entries = [json.loads(line) for line in (out / "ledger.jsonl").read_text().splitlines()]
    verdicts = {e["decision"]: e for e in entries if e["event"] == "verdict"}
    assert set(verdicts) == {"approve", "reject"}
    assert state["rule"] == verdicts["approve"]["puts_in_force"] or state["since"] > verdicts["approve"]["date"]


def test_review_report_states_the_rule_in_force_and_the_command(nights):
    _, out, decisions, _ = nights
    report = (out / f"batch_date={APPROVED_NIGHT}" / "report.html").read_text()
    first = decisions[AGGREGATED_NIGHT]["draw"]["rule"]
    # rule_text of a threshold rule with above = 0: "<feature> > <cut>: reject; otherwise accept"
    assert first["above"] == 0
    assert f"{first['feature']} &gt; {first['cut']:g}: reject; otherwise accept (since {AGGREGATED_NIGHT})" in report
    assert f"truthsieve verdict --out OUT --date {APPROVED_NIGHT} (--approve | --reject) --by NAME" in report
    aggregated = (out / f"batch_date={AGGREGATED_NIGHT}" / "report.html").read_text()
    assert "none (no night aggregated or approved yet)" in aggregated and "truthsieve verdict" not in aggregated
