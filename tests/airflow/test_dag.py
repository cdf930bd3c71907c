"""The nightly DAG on a real Airflow (SQLite): parse, run with dag.test(), alerts by SMTP."""

from __future__ import annotations

import json
import subprocess
import sys
from email import message_from_bytes
from pathlib import Path

import pytest

from conftest import REPO

pytestmark = pytest.mark.airflow

DATE = "2026-11-03"


def test_dag_folder_imports_cleanly_without_heavy_imports():
    code = (
        "import sys\n"
        "from airflow.dag_processing.dagbag import DagBag\n"
        "before = set(sys.modules)\n"
        f"bag = DagBag(dag_folder={str(REPO / 'dags')!r})\n"
        "assert not bag.import_errors, bag.import_errors\n"
        "assert 'truthsieve_nightly' in bag.dags\n"
        "new = set(sys.modules) - before\n"
        "heavy = sorted(m for m in new if m.split('.')[0] in ('pandas', 'pyarrow', 'truthsieve.pipeline') or m.startswith('truthsieve.pipeline') or m.startswith('truthsieve.core'))\n"
        "assert not heavy, heavy\n"
        "dag = bag.dags['truthsieve_nightly']\n"
        "assert dag.catchup is False\n"
        "print(sorted(t.task_id for t in dag.tasks))\n"
    )
    import os

    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=os.environ.copy())
    assert result.returncode == 0, result.stderr[-3000:]
    assert "decide_and_publish" in result.stdout and "validate_source" in result.stdout and "check_items" in result.stdout


def _run_dag(inbox: Path, out: Path, config: Path, **conf):
    from airflow.dag_processing.dagbag import DagBag
    import datetime as dt

    bag = DagBag(dag_folder=str(REPO / "dags"))
    dag = bag.dags["truthsieve_nightly"]
    for task in dag.tasks:
        task.retries = 0  # dag.test() would wait out the retry delay instead of failing
    return dag.test(
        logical_date=dt.datetime.fromisoformat(DATE).replace(tzinfo=dt.timezone.utc),
        run_conf={"inbox": str(inbox), "out": str(out), "config": str(config), **conf},
    )


def test_dag_run_publishes_the_same_decision_as_the_cli_and_alerts_owners(airflow_db, tmp_path, monkeypatch):
    sys.path.insert(0, str(REPO / "tests" / "pipeline"))
    from aiosmtpd.controller import Controller
    from aiosmtpd.handlers import Message
    from inboxes import cli, write_batch, write_config

    received = []

    class Collector(Message):
        def handle_message(self, message):
            received.append(message)

        def prepare_message(self, session, envelope):
            message = message_from_bytes(envelope.content)
            message["X-Envelope-To"] = ",".join(envelope.rcpt_tos)
            return message

    import socket

    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    controller = Controller(Collector(), hostname="127.0.0.1", port=port)
    controller.start()
    try:
        monkeypatch.setenv(
            "AIRFLOW_CONN_SMTP_DEFAULT",
            json.dumps({"conn_type": "smtp", "host": "127.0.0.1", "port": port, "extra": {"disable_ssl": True, "disable_tls": True, "timeout": 10, "retry_limit": 0}}),
        )
        inbox, config = tmp_path / "inbox", write_config(tmp_path / "c.yaml")
        write_batch(inbox, DATE, seed=9, bend={"south": 16.0})
        run = _run_dag(inbox, tmp_path / "airflow-out", config)
        assert run.state == "success", run.state
    finally:
        controller.stop()

    assert cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(config), "--out", str(tmp_path / "cli-out")).returncode == 0
    from_dag = (tmp_path / "airflow-out" / f"batch_date={DATE}" / "decision.json").read_bytes()
    from_cli = (tmp_path / "cli-out" / f"batch_date={DATE}" / "decision.json").read_bytes()
    assert from_dag == from_cli
    decision = json.loads(from_dag)
    assert decision["route"] == "aggregate"  # strategy_proof (default): the flag is alerted, not a gate

    recipients = sorted(m["X-Envelope-To"] for m in received)
    assert recipients == ["platform@example.org", "south@example.org"]
    south = next(m for m in received if m["X-Envelope-To"] == "south@example.org")
    assert "rule_shaped" in south["Subject"]
    body = south.get_payload(decode=False)
    text = body if isinstance(body, str) else "".join(p.get_payload(decode=True).decode() for p in south.walk() if p.get_content_type() == "text/html")
    assert "a report tuned to one rule" in text  # evidence, not an accusation
    sent = json.loads((tmp_path / "airflow-out" / f"batch_date={DATE}" / "alerts_sent.json").read_text())
    assert len(sent["sent"]) == 2


def test_dag_run_on_object_storage_matches_the_cli(airflow_db, tmp_path):
    # fsspec's in-memory file system stands in for a bucket: the same ObjectStoragePath
    # code path as s3:// or gs://, without a network.
    import fsspec
    from airflow.sdk import ObjectStoragePath
    from airflow.sdk.io import attach

    # Production buckets come with their provider (s3://, gs://); the test registers fsspec's
    # memory file system the same way, so every task reads and writes through it.
    attach("memory", fs=fsspec.filesystem("memory"))
    sys.path.insert(0, str(REPO / "tests" / "pipeline"))
    from inboxes import cli, write_batch, write_config

    inbox, config = tmp_path / "inbox", write_config(tmp_path / "c.yaml")
    write_batch(inbox, DATE, seed=12)
    bucket = ObjectStoragePath(f"memory://truthsieve-test-{tmp_path.name}")
    for path in inbox.rglob("*.parquet"):
        target = bucket / "inbox" / str(path.relative_to(inbox))
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_bytes(path.read_bytes())

    run = _run_dag(str(bucket / "inbox"), str(bucket / "out"), config)
    assert run.state == "success", run.state
    assert cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(config), "--out", str(tmp_path / "cli-out")).returncode == 0
    published = bucket / "out" / f"batch_date={DATE}"
    assert (published / "decision.json").read_bytes() == (tmp_path / "cli-out" / f"batch_date={DATE}" / "decision.json").read_bytes()
    assert (published / "aggregate.parquet").is_file()
    assert (bucket / "out" / "index.html").is_file()


def test_a_bad_file_is_quarantined_byte_for_byte_and_send_mail_false_needs_no_smtp(airflow_db, tmp_path, monkeypatch):
    sys.path.insert(0, str(REPO / "tests" / "pipeline"))
    import pyarrow as pa
    import pyarrow.parquet as pq
    from inboxes import write_batch, write_config

    monkeypatch.delenv("AIRFLOW_CONN_SMTP_DEFAULT", raising=False)
    inbox, config, out = tmp_path / "inbox", write_config(tmp_path / "c.yaml"), tmp_path / "airflow-out"
    folder = write_batch(inbox, DATE, seed=9)
    bad = folder / "source_id=east" / "labels.parquet"
    pq.write_table(pa.table({"item_id": ["lot-00000"], "grade": ["A"]}), bad)  # no label column
    run = _run_dag(inbox, out, config, send_mail=False)
    assert run.state == "success", run.state
    states = {ti.task_id: ti.state for ti in run.get_task_instances()}
    assert states["send_alerts"] == "skipped", states
    batch = out / f"batch_date={DATE}"
    assert (batch / "quarantine" / "source_id=east" / "labels.parquet").read_bytes() == bad.read_bytes()
    decision = json.loads((batch / "decision.json").read_text())
    assert [q["source_id"] for q in decision["quarantined"]] == ["east"]
