"""`airflow backfill create` with a real scheduler and API server gives the CLI's results."""

from __future__ import annotations

import json
import sys

import pytest

from conftest import REPO
from live_stack import free_port, live_stack

pytestmark = [pytest.mark.airflow, pytest.mark.slow]

DATES = ["2026-11-02", "2026-11-03", "2026-11-04"]
DAG_ID = "truthsieve_nightly"


def test_backfill_of_three_nights_matches_the_cli_backfill(tmp_path):
    sys.path.insert(0, str(REPO / "tests" / "pipeline"))
    from aiosmtpd.controller import Controller
    from aiosmtpd.handlers import Sink
    from inboxes import cli, write_batch, write_config

    inbox, config = tmp_path / "inbox", write_config(tmp_path / "c.yaml")
    for k, date in enumerate(DATES):
        write_batch(inbox, date, seed=20 + k, bend={"south": 16.0} if k == 2 else None)
    cli_out, airflow_out = tmp_path / "cli-out", tmp_path / "airflow-out"
    done = cli("backfill", "--inbox", str(inbox), "--from", DATES[0], "--to", DATES[-1], "--config", str(config), "--out", str(cli_out))
    assert done.returncode == 0, done.stderr

    smtp_port = free_port()
    smtp = Controller(Sink(), hostname="127.0.0.1", port=smtp_port)
    smtp.start()
    extra_env = {
        "AIRFLOW_CONN_SMTP_DEFAULT": json.dumps(
            {"conn_type": "smtp", "host": "127.0.0.1", "port": smtp_port, "extra": {"disable_ssl": True, "disable_tls": True, "timeout": 10, "retry_limit": 0}}
        ),
        "TRUTHSIEVE_INBOX": str(inbox),
        "TRUTHSIEVE_OUT": str(airflow_out),
        "TRUTHSIEVE_CONFIG": str(config),
    }

    def queue_backfill(stack):
        # Queued before the services start: SQLite allows one writer at a time.
        stack.airflow("dags", "reserialize")
        stack.airflow("dags", "unpause", DAG_ID)
        stack.airflow("backfill", "create", "--dag-id", DAG_ID, "--from-date", DATES[0], "--to-date", DATES[-1], "--max-active-runs", "1")

    def finished(stack):
        runs = stack.api("GET", f"/api/v2/dags/{DAG_ID}/dagRuns?limit=100")["dag_runs"]
        # Unpausing also schedules today's run (no batch there); only the backfill matters.
        states = {r["logical_date"][:10]: r["state"] for r in runs if r["logical_date"] and r["logical_date"][:10] in DATES}
        return states if len(states) == 3 and all(s in ("success", "failed") for s in states.values()) else None

    try:
        with live_stack(tmp_path, extra_env=extra_env, before_services=queue_backfill, components=("api-server", "scheduler")) as stack:
            states = stack.wait_for(lambda: finished(stack), timeout=420, what="the three backfill runs to finish", interval=2)
            assert states == {d: "success" for d in DATES}, (states, stack.log("scheduler"))
    finally:
        smtp.stop()

    for date in DATES:
        from_airflow = (airflow_out / f"batch_date={date}" / "decision.json").read_bytes()
        assert from_airflow == (cli_out / f"batch_date={date}" / "decision.json").read_bytes(), date
    assert json.loads((airflow_out / f"batch_date={DATES[-1]}" / "decision.json").read_text())["route"] == "review"
