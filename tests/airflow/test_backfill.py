"""`airflow backfill create` with a real scheduler and API server gives the CLI's results."""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

from conftest import REPO

pytestmark = [pytest.mark.airflow, pytest.mark.slow]

DATES = ["2026-11-02", "2026-11-03", "2026-11-04"]
DAG_ID = "truthsieve_nightly"


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def test_backfill_of_three_nights_matches_the_cli_backfill(tmp_path):
    sys.path.insert(0, str(REPO / "tests" / "pipeline"))
    from inboxes import cli, write_batch, write_config

    inbox, config = tmp_path / "inbox", write_config(tmp_path / "c.yaml")
    for k, date in enumerate(DATES):
        write_batch(inbox, date, seed=20 + k, bend={"south": 16.0} if k == 2 else None)
    cli_out, airflow_out = tmp_path / "cli-out", tmp_path / "airflow-out"
    done = cli("backfill", "--inbox", str(inbox), "--from", DATES[0], "--to", DATES[-1], "--config", str(config), "--out", str(cli_out))
    assert done.returncode == 0, done.stderr

    from aiosmtpd.controller import Controller
    from aiosmtpd.handlers import Sink

    smtp_port = free_port()
    smtp = Controller(Sink(), hostname="127.0.0.1", port=smtp_port)
    smtp.start()
    home = tmp_path / "airflow-home"
    port = free_port()
    env = {
        **os.environ,
        "AIRFLOW_HOME": str(home),
        "AIRFLOW__DATABASE__SQL_ALCHEMY_CONN": f"sqlite:///{home}/airflow.db",
        "AIRFLOW__CORE__DAGS_FOLDER": str(REPO / "dags"),
        "AIRFLOW__CORE__LOAD_EXAMPLES": "False",
        "AIRFLOW__CORE__PARALLELISM": "4",
        "AIRFLOW__API__PORT": str(port),
        "AIRFLOW__CORE__EXECUTION_API_SERVER_URL": f"http://127.0.0.1:{port}/execution/",
        "AIRFLOW__SCHEDULER__SCHEDULER_HEARTBEAT_SEC": "1",
        "AIRFLOW_CONN_SMTP_DEFAULT": json.dumps(
            {"conn_type": "smtp", "host": "127.0.0.1", "port": smtp_port, "extra": {"disable_ssl": True, "disable_tls": True, "timeout": 10, "retry_limit": 0}}
        ),
        "TRUTHSIEVE_INBOX": str(inbox),
        "TRUTHSIEVE_OUT": str(airflow_out),
        "TRUTHSIEVE_CONFIG": str(config),
    }
    airflow = str(Path(sys.executable).with_name("airflow"))

    def run(*args: str) -> subprocess.CompletedProcess:
        result = subprocess.run([airflow, *args], env=env, capture_output=True, text=True, timeout=180)
        assert result.returncode == 0, result.stderr[-3000:]
        return result

    run("db", "migrate")
    run("dags", "reserialize")
    # Queue the backfill before the services start: SQLite allows one writer at a time.
    run("dags", "unpause", DAG_ID)
    run("backfill", "create", "--dag-id", DAG_ID, "--from-date", DATES[0], "--to-date", DATES[-1], "--max-active-runs", "1")
    logs = tmp_path / "logs"
    logs.mkdir()
    services = [
        subprocess.Popen([airflow, name, *extra], env=env, stdout=open(logs / f"{name}.log", "w"), stderr=subprocess.STDOUT)
        for name, extra in (("api-server", ["--port", str(port)]), ("scheduler", []))
    ]
    try:
        deadline = time.monotonic() + 240
        states: dict = {}
        while time.monotonic() < deadline:
            output = run("dags", "list-runs", DAG_ID, "-o", "json").stdout.splitlines()
            listed = json.loads(next((line for line in reversed(output) if line.startswith("[")), "[]"))
            # Unpausing also schedules today's run (no batch there); only the backfill matters.
            states = {r["logical_date"][:10]: r["state"] for r in listed if r["logical_date"][:10] in DATES}
            if len(states) == 3 and all(s in ("success", "failed") for s in states.values()):
                break
            time.sleep(2)
        assert states == {d: "success" for d in DATES}, (states, (logs / "scheduler.log").read_text()[-3000:])
    finally:
        for process in services:
            process.terminate()
        for process in services:
            try:
                process.wait(timeout=30)
            except subprocess.TimeoutExpired:
                process.kill()
        smtp.stop()

    for date in DATES:
        from_airflow = (airflow_out / f"batch_date={date}" / "decision.json").read_bytes()
        assert from_airflow == (cli_out / f"batch_date={date}" / "decision.json").read_bytes(), date
    assert json.loads((airflow_out / f"batch_date={DATES[-1]}" / "decision.json").read_text())["route"] == "review"
