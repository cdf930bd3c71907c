"""Review nights in Airflow: the verdict recorder on its own, then one live stack where a
person answers the human-in-the-loop task through the REST API.

Known answers come from the command line's own outputs (``decision.json``'s drawn rule,
``truthsieve ledger --verify``), never from the Airflow code under test.
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import pytest

from conftest import REPO

pytestmark = pytest.mark.airflow

DAG_ID = "truthsieve_nightly"
EARLIER, NIGHT = "2026-11-02", "2026-11-03"
sys.path.insert(0, str(REPO / "tests" / "pipeline"))


def _screen(inbox: Path, out: Path, config: Path, date: str) -> dict:
    from truthsieve.pipeline.cli import main  # in-process: the same code as the command, no start-up cost

    assert main(["screen", "--inbox", str(inbox), "--date", date, "--config", str(config), "--out", str(out)]) == 0
    return json.loads((out / f"batch_date={date}" / "decision.json").read_text())


def _ledger(out: Path) -> list[dict]:
    return [json.loads(line) for line in (out / "ledger.jsonl").read_text().splitlines()]


def _verify(out: Path) -> None:
    from inboxes import cli

    done = cli("ledger", "--out", str(out), "--verify")
    assert done.returncode == 0, done.stdout + done.stderr


def _nights(tmp_path: Path):
    """EARLIER aggregated (its rule in force), NIGHT routed to review (too few sources: the
    policy asks for 9, the batch has 4)."""
    from inboxes import write_batch, write_config

    inbox, out = tmp_path / "inbox", tmp_path / "out"
    write_batch(inbox, EARLIER, seed=4)
    write_batch(inbox, NIGHT, seed=5)
    earlier = _screen(inbox, out, write_config(tmp_path / "plain.yaml"), EARLIER)
    night = _screen(inbox, out, write_config(tmp_path / "review.yaml", routing={"min_valid_sources": 9}), NIGHT)
    assert (earlier["route"], night["route"]) == ("aggregate", "review")
    return out, earlier, night


def _answer(option: str, name: str = "ana", at: str = "2026-11-04T08:00:00+00:00") -> dict:
    return {"chosen_options": [option], "params_input": {"note": "checked"}, "responded_at": at, "responded_by_user": {"id": "7", "name": name}}


def _recorder(out: Path, answer: dict, date: str = NIGHT):
    from truthsieve.airflow import RecordVerdictOperator

    return RecordVerdictOperator(task_id="record_verdict", out=str(out), batch_date=date, response=answer)


def test_approve_puts_the_drawn_rule_in_force_and_a_repeat_is_idempotent(tmp_path):
    from airflow.sdk.exceptions import AirflowFailException

    out, _, night = _nights(tmp_path)
    state = _recorder(out, _answer("Approve")).execute({})
    lines = _ledger(out)
    verdict = next(e for e in lines if e["event"] == "verdict")
    assert (verdict["decision"], verdict["by"], verdict["at"], verdict["date"]) == ("approve", "ana", "2026-11-04T08:00:00+00:00", NIGHT)
    assert verdict["note"].startswith("checked")
    assert state["rule"] == night["draw"]["rule"] and state["since"] == NIGHT and state["seq"] == verdict["seq"]
    assert json.loads((out / "in_force.json").read_text()) == state
    _verify(out)

    from truthsieve.airflow.review import published_rule

    extra = published_rule(str(out), NIGHT, "review")  # the asset event's extra: the verdict's line
    assert (extra["rule"], extra["seq"], extra["by"], extra["status"], extra["in_force"]) == (night["draw"]["rule"], verdict["seq"], "ana", "approved", True)
    assert published_rule(str(out), EARLIER, "aggregate")["in_force"] is False  # the later approved night wins

    # The same answer again (a retried task): nothing appended, the same rule in force.
    assert _recorder(out, _answer("Approve")).execute({}) == state
    assert len(_ledger(out)) == len(lines)
    # A different answer on a decided night is the pipeline's clear error, and changes nothing.
    with pytest.raises(AirflowFailException, match=f"night {NIGHT} is not awaiting review .*approved by ana"):
        _recorder(out, _answer("Reject", name="ben")).execute({})
    assert len(_ledger(out)) == len(lines)


def test_reject_keeps_the_earlier_rule_and_no_asset_extra(tmp_path):
    from truthsieve.airflow.review import published_rule

    out, earlier, night = _nights(tmp_path)
    before = json.loads((out / "in_force.json").read_text())
    assert before["since"] == EARLIER and before["rule"] == earlier["draw"]["rule"]
    assert published_rule(str(out), NIGHT, "review") is None  # awaiting review: no event yet
    state = _recorder(out, _answer("Reject", name="ben")).execute({})
    assert (state["rule"], state["since"], state["seq"]) == (before["rule"], EARLIER, before["seq"])
    assert [e["decision"] for e in _ledger(out) if e["event"] == "verdict"] == ["reject"]
    assert published_rule(str(out), NIGHT, "review") is None
    _verify(out)
    # The earlier, aggregated night's event names the ledger line of its publication.
    extra = published_rule(str(out), EARLIER, "aggregate")
    published = next(e for e in _ledger(out) if e["event"] == "night_published" and e["date"] == EARLIER)
    assert (extra["rule"], extra["seq"], extra["by"], extra["in_force"]) == (earlier["draw"]["rule"], published["seq"], None, True)


def test_an_answer_without_a_person_or_option_records_nothing(tmp_path):
    from airflow.sdk.exceptions import AirflowFailException

    out, _, _ = _nights(tmp_path)
    count = len(_ledger(out))
    timed_out = {**_answer("Approve"), "responded_by_user": None}  # what a timeout default would give
    with pytest.raises(AirflowFailException, match="names no user"):
        _recorder(out, timed_out).execute({})
    with pytest.raises(AirflowFailException, match="must be one of"):
        _recorder(out, _answer("Maybe")).execute({})
    assert len(_ledger(out)) == count
    assert json.loads((out / f"batch_date={NIGHT}" / "review.json").read_text())["status"] == "awaiting_review"


def test_the_review_task_asks_about_the_night_and_a_timeout_cannot_approve(tmp_path):
    from airflow.dag_processing.dagbag import DagBag

    from truthsieve.airflow.review import review_request

    out, _, night = _nights(tmp_path)
    asked = review_request(str(out), NIGHT)
    assert NIGHT in asked["subject"]
    rule = night["draw"]["rule"]  # moisture_pct cut from decision.json, rendered like the report
    assert f"{rule['feature']} > {rule['cut']:g}" in asked["body"] and "Would apply if approved" in asked["body"]
    assert "too_few_sources" in asked["body"] and str(out / f"batch_date={NIGHT}" / "report.html") in asked["body"]
    assert f"truthsieve verdict --out {out} --date {NIGHT} --approve --by NAME" in asked["body"]

    task = DagBag(dag_folder=str(REPO / "dags")).dags[DAG_ID].get_task("review_night")
    assert task.options == ["Approve", "Reject"] and task.defaults is None  # a timeout fails, never approves
    assert 0 < task.response_timeout.total_seconds() < 24 * 3600 and task.retries == 0


def test_an_aggregated_night_skips_the_review_and_still_announces_its_rule(airflow_db, tmp_path):
    import datetime as dt

    from airflow.dag_processing.dagbag import DagBag
    from airflow.models.asset import AssetEvent, AssetModel
    from airflow.utils.session import create_session
    from inboxes import write_batch, write_config

    inbox, out = tmp_path / "inbox", tmp_path / "out"
    write_batch(inbox, NIGHT, seed=5)
    dag = DagBag(dag_folder=str(REPO / "dags")).dags[DAG_ID]
    for task in dag.tasks:
        task.retries = 0
    run = dag.test(
        logical_date=dt.datetime.fromisoformat(NIGHT).replace(tzinfo=dt.timezone.utc),
        run_conf={"inbox": str(inbox), "out": str(out), "config": str(write_config(tmp_path / "c.yaml")), "send_mail": False},
    )
    states = {ti.task_id: ti.state for ti in run.get_task_instances()}
    assert run.state == "success" and (states["review_night"], states["record_verdict"], states["announce_aggregate"]) == ("skipped", "skipped", "success"), states
    decision = json.loads((out / f"batch_date={NIGHT}" / "decision.json").read_text())
    published = next(e for e in _ledger(out) if e["event"] == "night_published")
    with create_session() as session:
        events = (
            session.query(AssetEvent).join(AssetModel, AssetEvent.asset_id == AssetModel.id)
            .filter(AssetModel.name == "truthsieve_published_aggregate", AssetEvent.source_run_id == run.run_id).all()
        )
        extras = [e.extra for e in events]
    assert len(extras) == 1 and extras[0]["rule"] == decision["draw"]["rule"] and extras[0]["seq"] == published["seq"], extras
    assert (extras[0]["status"], extras[0]["by"], extras[0]["in_force"]) == ("aggregated", None, True)


@pytest.mark.slow
def test_a_review_night_answered_through_the_rest_api_is_ledgered_and_announced(tmp_path):
    from inboxes import cli, write_batch, write_config
    from live_stack import live_stack

    inbox, out = tmp_path / "inbox", tmp_path / "out"
    write_batch(inbox, NIGHT, seed=5)
    config = write_config(tmp_path / "review.yaml", routing={"min_valid_sources": 9})
    run_id = "review-night"
    conf = {"inbox": str(inbox), "out": str(out), "config": str(config), "send_mail": False}
    ti_path = f"/api/v2/dags/{DAG_ID}/dagRuns/{run_id}/taskInstances"
    extra_env = {"TRUTHSIEVE_INBOX": str(inbox), "TRUTHSIEVE_OUT": str(out), "TRUTHSIEVE_CONFIG": str(config), "TRUTHSIEVE_SEND_MAIL": "false"}

    def prepare(stack):
        stack.airflow("dags", "reserialize")
        stack.airflow("dags", "unpause", DAG_ID)

    started = time.monotonic()
    with live_stack(tmp_path, extra_env=extra_env, before_services=prepare, components=("api-server", "scheduler")) as stack:
        stack.api("POST", f"/api/v2/dags/{DAG_ID}/dagRuns", {"dag_run_id": run_id, "logical_date": f"{NIGHT}T00:00:00Z", "conf": conf})

        def review_state():
            state = stack.api("GET", f"{ti_path}/review_night")["state"]
            assert state not in ("failed", "upstream_failed", "skipped"), state
            return state == "awaiting_input"

        stack.wait_for(review_state, timeout=300, what="review_night to await input", interval=1)
        # A person answers minutes later; a test answers at once. Answering before the scheduler
        # has taken the deferring workload's own exit event lets that late event land on the
        # resumed, already queued task, which Airflow then marks failed (seen once in CI). So
        # answer only after the scheduler logged that event: a condition, polled with a bound.
        deferred_exit = "task_id='review_night', run_id='review-night', try_number=1"
        stack.wait_for(
            lambda: any("Received executor event" in line and deferred_exit in line for line in stack.log("scheduler", 200_000).splitlines()),
            timeout=120,
            what="the scheduler to take review_night's deferral exit",
            interval=0.5,
        )
        asked = stack.api("GET", f"{ti_path}/review_night/-1/hitlDetails")
        assert NIGHT in asked["subject"] and "Would apply if approved" in asked["body"] and asked["options"] == ["Approve", "Reject"]
        assert not (out / f"batch_date={NIGHT}" / "review.json").read_text().count('"approved"')
        answered = stack.api("PATCH", f"{ti_path}/review_night/-1/hitlDetails", {"chosen_options": ["Approve"], "params_input": {"note": "looks right"}})
        responder = answered["responded_by"]["name"]  # HITLDetailResponse: responded_by {id, name}

        def run_done():
            state = stack.api("GET", f"/api/v2/dags/{DAG_ID}/dagRuns/{run_id}")["state"]
            return state if state in ("success", "failed") else None

        assert stack.wait_for(run_done, timeout=300, what="the review run to finish", interval=1) == "success", stack.log("scheduler")
        states = {t["task_id"]: t["state"] for t in stack.api("GET", f"{ti_path}?limit=100")["task_instances"]}
        events = stack.api("GET", f"/api/v2/assets/events?source_dag_id={DAG_ID}&source_run_id={run_id}")["asset_events"]
    elapsed = time.monotonic() - started
    print(f"live review stack: {elapsed:.0f} s")

    assert responder == "admin"  # the simple auth manager's user that answered
    assert (states["review_night"], states["record_verdict"], states["announce_aggregate"]) == ("success", "success", "success"), states
    decision = json.loads((out / f"batch_date={NIGHT}" / "decision.json").read_text())
    verdict = [e for e in _ledger(out) if e["event"] == "verdict"]
    assert len(verdict) == 1 and (verdict[0]["decision"], verdict[0]["by"], verdict[0]["date"]) == ("approve", responder, NIGHT)
    assert verdict[0]["note"].startswith("looks right")
    in_force = json.loads((out / "in_force.json").read_text())
    assert in_force["rule"] == decision["draw"]["rule"] and in_force["since"] == NIGHT and in_force["seq"] == verdict[0]["seq"]
    _verify(out)
    shown = cli("in-force", "--out", str(out), "--json")
    assert shown.returncode == 0 and json.loads(shown.stdout)["rule"] == decision["draw"]["rule"]
    [event] = [e for e in events if e["name"] == "truthsieve_published_aggregate"]
    assert event["extra"]["rule"] == decision["draw"]["rule"] and event["extra"]["seq"] == verdict[0]["seq"], event
    assert (event["extra"]["date"], event["extra"]["by"], event["extra"]["status"]) == (NIGHT, responder, "approved")
