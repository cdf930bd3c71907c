"""The ledger's hash chain, its derivation of the rule in force, and concurrent writers."""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import pytest

from inboxes import cli, write_batch, write_config
from truthsieve.exceptions import VerdictError
from truthsieve.pipeline import ledger
from truthsieve.pipeline.outputs import batch_output
from truthsieve.pipeline.verdicts import record_publication, record_verdict

AT = "2026-11-20T08:00:00+00:00"  # a fixed clock: tests pass the verdict's time in


def rule(cut: float) -> dict:
    return {"kind": "threshold", "feature": "moisture_pct", "cut": cut, "above": 0}


def decision_bytes(date: str, route: str, cut: float | None) -> bytes:
    draw = None if cut is None else {"rule": rule(cut)}
    fields = {"batch_date": date, "route": route, "draw": draw, "mechanism": None, "sources": [], "quarantined": []}
    return json.dumps(fields, sort_keys=True).encode()


def publish_fake(out: Path, date: str, route: str, cut: float | None) -> dict:
    """A published night without running a screen: its decision.json and the ledger entry."""
    data = decision_bytes(date, route, cut)
    batch_output(out, date).mkdir(parents=True, exist_ok=True)
    (batch_output(out, date) / "decision.json").write_bytes(data)
    return record_publication(out, date, data)


@pytest.fixture
def six_lines(tmp_path) -> Path:
    out = tmp_path / "out"
    publish_fake(out, "2026-11-02", "aggregate", 14.0)
    publish_fake(out, "2026-11-03", "review", 15.0)
    publish_fake(out, "2026-11-04", "aggregate", 13.5)
    assert len((out / "ledger.jsonl").read_bytes().splitlines()) == 6
    return out


def verify(out: Path):
    return cli("ledger", "--out", str(out), "--verify")


def broken_at(out: Path, line: int) -> str:
    result = verify(out)
    assert result.returncode != 0 and "Traceback" not in result.stderr
    message = result.stderr.strip()
    assert len(message.splitlines()) == 1 and f"line {line}:" in message, message
    return message


def test_each_line_carries_the_sha256_of_the_previous_line(six_lines):
    lines = (six_lines / "ledger.jsonl").read_bytes().split(b"\n")[:-1]
    assert json.loads(lines[0])["prev"] == "0" * 64
    for previous, line in zip(lines, lines[1:]):
        assert json.loads(line)["prev"] == hashlib.sha256(previous).hexdigest()
    assert [json.loads(line)["seq"] for line in lines] == [1, 2, 3, 4, 5, 6]
    assert verify(six_lines).returncode == 0
    head = json.loads((six_lines / "in_force.json").read_text())["ledger"]
    assert head == {"lines": 6, "last_sha256": hashlib.sha256(lines[-1]).hexdigest()}


def rewrite(out: Path, change) -> None:
    path = out / "ledger.jsonl"
    lines = path.read_bytes().split(b"\n")[:-1]
    path.write_bytes(b"".join(line + b"\n" for line in change(lines)))


def test_an_edited_line_is_named(six_lines):
    rewrite(six_lines, lambda lines: [*lines[:2], lines[2].replace(b'"review"', b'"aggregate"'), *lines[3:]])
    assert "edited" in broken_at(six_lines, 3)


def test_an_edited_line_with_a_recomputed_own_hash_is_caught_by_the_next(six_lines):
    def forge(lines):
        entry = json.loads(lines[2])
        entry["route"] = "aggregate"
        return [*lines[:2], ledger.seal(entry, entry["seq"], entry["prev"]), *lines[3:]]

    rewrite(six_lines, forge)
    broken_at(six_lines, 4)


def test_a_deleted_line_is_named(six_lines):
    rewrite(six_lines, lambda lines: [*lines[:2], *lines[3:]])
    broken_at(six_lines, 3)


def test_reordered_lines_are_named(six_lines):
    rewrite(six_lines, lambda lines: [lines[0], lines[2], lines[1], *lines[3:]])
    broken_at(six_lines, 2)


def test_a_dropped_last_line_is_caught_by_the_recorded_head(six_lines):
    rewrite(six_lines, lambda lines: lines[:-1])
    assert "missing" in broken_at(six_lines, 6)


def test_a_half_written_last_line_is_named(six_lines):
    path = six_lines / "ledger.jsonl"
    path.write_bytes(path.read_bytes() + b'{"event": "verd')
    assert "incomplete" in broken_at(six_lines, 7)


def test_a_broken_ledger_refuses_new_events(six_lines):
    rewrite(six_lines, lambda lines: [lines[1], lines[0], *lines[2:]])
    result = cli("verdict", "--out", str(six_lines), "--date", "2026-11-03", "--approve", "--by", "Wren")
    assert result.returncode == 2 and "line 1:" in result.stderr


# ---- the rule in force, derived from hand-built histories ---------------------------------


def test_in_force_follows_aggregation_approval_rejection_and_revocation(tmp_path):
    out = tmp_path / "out"
    assert publish_fake(out, "2026-11-02", "aggregate", 14.0)["rule"] == rule(14.0)  # aggregated: put in force
    assert publish_fake(out, "2026-11-03", "review", 15.0)["rule"] == rule(14.0)  # review: the previous rule stays
    state = record_verdict(out, "2026-11-03", True, "Wren", "ok", AT)
    assert state["rule"] == rule(15.0) and state["since"] == "2026-11-03" and state["event"]["at"] == AT
    with pytest.raises(VerdictError, match="not awaiting review"):
        record_verdict(out, "2026-11-03", False, "Someone", "", AT)  # decided nights take no second verdict
    with pytest.raises(VerdictError, match="not awaiting review"):
        record_verdict(out, "2026-11-02", True, "Someone", "", AT)  # aggregated nights take none
    publish_fake(out, "2026-11-04", "review", 16.0)
    assert record_verdict(out, "2026-11-04", False, "Wren", "no", AT)["rule"] == rule(15.0)  # rejection keeps it
    entries = ledger.read_ledger(out)
    assert [e["action"] for e in entries if e["event"] == "in_force"] == ["put", "kept", "put", "kept", "kept"]
    assert ledger.derive(entries, "2026-11-02")["rule"] == rule(14.0)  # replay as of the first night
    assert ledger.derive(entries, "2026-11-01")["rule"] is None
    # A later aggregated night wins over an earlier approval; approving an older night later does not undo it.
    publish_fake(out, "2026-11-06", "aggregate", 13.0)
    publish_fake(out, "2026-11-05", "review", 17.0)
    assert record_verdict(out, "2026-11-05", True, "Wren", "", AT)["rule"] == rule(13.0)
    from truthsieve.pipeline.verdicts import record_revocation

    assert record_revocation(out, "2026-11-06", "Wren", "flagged after publication", AT)["rule"] == rule(17.0)
    assert json.loads((out / "in_force.json").read_text())["since"] == "2026-11-05"


# ---- concurrent writers -------------------------------------------------------------------

APPENDER = """
import json, sys
from pathlib import Path
from truthsieve.pipeline.verdicts import record_publication
out, prefix, n = Path(sys.argv[1]), sys.argv[2], int(sys.argv[3])
for k in range(n):
    date = f"2027-{prefix}-{k + 1:02d}"
    record_publication(out, date, json.dumps({"route": "review", "draw": None}).encode())
"""


def test_concurrent_verdicts_screens_and_appends_never_interleave(tmp_path):
    out = tmp_path / "out"
    review_dates = [f"2026-12-{d:02d}" for d in range(1, 7)]
    for date in review_dates:  # decisions on disk, not yet ledgered: verdicts ledger them first
        batch_output(out, date).mkdir(parents=True)
        (batch_output(out, date) / "decision.json").write_bytes(decision_bytes(date, "review", 14.0 + len(date) % 3))
    config = write_config(tmp_path / "c.yaml")
    screened = ["2026-11-02", "2026-11-03"]
    for k, date in enumerate(screened):
        write_batch(tmp_path / "inbox", date, seed=k)
    command = [sys.executable, "-m", "truthsieve.pipeline.cli"]
    processes = [
        subprocess.Popen([*command, "screen", "--inbox", str(tmp_path / "inbox"), "--date", d, "--config", str(config), "--out", str(out)], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        for d in screened
    ]
    processes += [
        subprocess.Popen([*command, "verdict", "--out", str(out), "--date", d, "--approve" if k % 2 else "--reject", "--by", f"r{k}"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        for k, d in enumerate(review_dates)
    ]
    processes += [subprocess.Popen([sys.executable, "-c", APPENDER, str(out), m, "15"], stderr=subprocess.PIPE) for m in ("01", "02")]
    for process in processes:
        _, error = process.communicate(timeout=600)
        assert process.returncode == 0, error.decode()
    entries = ledger.read_ledger(out)  # raises on any broken or half line
    # screens: 2 lines each; verdicts: publication + verdict + in_force; appenders: 2 lines x 15 x 2
    assert len(entries) == 2 * 2 + 3 * 6 + 2 * 15 * 2
    assert sum(e["event"] == "verdict" for e in entries) == 6
    assert verify(out).returncode == 0


def events_of(out: Path) -> list[dict]:
    return [json.loads(line) for line in (out / "ledger.jsonl").read_text().splitlines()]


def test_a_changed_republication_never_undoes_a_revocation_or_a_verdict(tmp_path):
    """README: a re-screen that changes a decided night is flagged and the night awaits a
    new verdict; an aggregate route does not put its rule back in force by itself."""
    from truthsieve.pipeline.verdicts import record_revocation

    out = tmp_path / "out"
    publish_fake(out, "2026-11-02", "aggregate", 14.0)
    publish_fake(out, "2026-11-03", "aggregate", 15.0)
    assert record_revocation(out, "2026-11-03", "Wren", "farm flagged", AT)["rule"] == rule(14.0)
    lines = len(events_of(out))
    # identical re-publication (same decision sha256): the revocation stands, no flag
    assert publish_fake(out, "2026-11-03", "aggregate", 15.0)["rule"] == rule(14.0)
    assert "changed_after_verdict" not in [e["event"] for e in events_of(out)[lines:]]
    # changed bytes, still routed aggregate: flagged, the revoked night's rule is NOT back
    state = publish_fake(out, "2026-11-03", "aggregate", 15.5)
    new = events_of(out)[-3:]
    assert [e["event"] for e in new] == ["night_published", "changed_after_verdict", "in_force"]
    assert new[-1]["action"] == "kept" and state["rule"] == rule(14.0) and state["since"] == "2026-11-02"
    assert ledger.nights(events_of(out))["2026-11-03"].status == ledger.AWAITING
    review = json.loads((batch_output(out, "2026-11-03") / "review.json").read_text())
    assert review["status"] == "awaiting_review"
    # the night takes a new verdict although its route is aggregate
    state = record_verdict(out, "2026-11-03", True, "Wren", "checked again", AT)
    assert state["rule"] == rule(15.5) and state["since"] == "2026-11-03" and state["event"]["kind"] == "verdict"
    assert json.loads((batch_output(out, "2026-11-03") / "review.json").read_text())["status"] == "approved"


def test_a_changed_aggregate_republication_does_not_keep_an_old_approval(tmp_path):
    out = tmp_path / "out"
    publish_fake(out, "2026-11-02", "aggregate", 14.0)
    publish_fake(out, "2026-11-03", "review", 15.0)
    assert record_verdict(out, "2026-11-03", True, "Wren", "", AT)["rule"] == rule(15.0)
    assert publish_fake(out, "2026-11-03", "review", 15.0)["rule"] == rule(15.0)  # identical: approval stands
    state = publish_fake(out, "2026-11-03", "aggregate", 16.0)  # changed, now routed aggregate
    assert state["rule"] == rule(14.0) and state["since"] == "2026-11-02"
    assert ledger.nights(events_of(out))["2026-11-03"].status == ledger.AWAITING
    with pytest.raises(VerdictError, match="not awaiting review"):
        record_verdict(out, "2026-11-02", True, "Wren", "", AT)  # an undecided aggregated night still refuses
    assert record_verdict(out, "2026-11-03", False, "Wren", "", AT)["rule"] == rule(14.0)


def one_line_failure(result, *words) -> str:
    assert result.returncode == 2 and "Traceback" not in result.stderr, (result.stdout, result.stderr)
    message = result.stderr.strip()
    assert len(message.splitlines()) == 1, message
    for word in words:
        assert word in message, message
    return message


def test_verify_of_a_missing_out_folder_fails(tmp_path):
    one_line_failure(verify(tmp_path / "nowhere"), "no such out folder", "nowhere")
    assert not (tmp_path / "nowhere").exists()  # verify creates nothing


@pytest.mark.parametrize("gone", [[ledger.LEDGER], [ledger.IN_FORCE], [ledger.LEDGER, ledger.IN_FORCE]])
def test_verify_fails_when_the_ledger_or_in_force_is_gone_beside_published_nights(six_lines, gone):
    assert verify(six_lines).returncode == 0
    for name in gone:
        (six_lines / name).unlink()
    one_line_failure(verify(six_lines), gone[0], "missing")


def test_verify_names_a_night_whose_decision_was_edited_after_publishing(six_lines):
    path = batch_output(six_lines, "2026-11-03") / "decision.json"
    path.write_bytes(path.read_bytes().replace(b'"review"', b'"aggregate"'))
    one_line_failure(verify(six_lines), "2026-11-03", "decision.json")
