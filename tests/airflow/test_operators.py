"""Operators called through ``execute()`` directly (no metadata DB): error classification,
alerts sent exactly once across retries against a real SMTP server, a missing connection."""

from __future__ import annotations

import json
import socket
import sys
import time
from pathlib import Path

import pytest

from conftest import REPO

sys.path.insert(0, str(REPO / "tests" / "pipeline"))
from inboxes import cli, write_batch, write_config  # noqa: E402

pytestmark = pytest.mark.airflow

DATE = "2026-11-03"


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def smtp_env(monkeypatch, port: int) -> None:
    monkeypatch.setenv(
        "AIRFLOW_CONN_SMTP_DEFAULT",
        json.dumps({"conn_type": "smtp", "host": "127.0.0.1", "port": port, "extra": {"disable_ssl": True, "disable_tls": True, "timeout": 10, "retry_limit": 0}}),
    )


@pytest.fixture
def review_night(tmp_path):
    """A published review night (one bent source) whose alerts.json holds two messages."""
    inbox, config, out = tmp_path / "inbox", write_config(tmp_path / "c.yaml"), tmp_path / "out"
    write_batch(inbox, DATE, seed=9, bend={"south": 16.0})
    result = cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(config), "--out", str(out))
    assert result.returncode == 0, result.stderr
    messages = json.loads((out / f"batch_date={DATE}" / "alerts.json").read_text())["messages"]
    assert len(messages) == 2
    return {"inbox": str(inbox), "batch_date": DATE, "config_path": str(config), "out": str(out)}


def alerts_operator(paths, **kwargs):
    from truthsieve.airflow import SendAlertsOperator

    return SendAlertsOperator(task_id="send_alerts", **paths, **kwargs)


def test_classify_retries_transient_io_and_fails_everything_else_at_once():
    from airflow.sdk.exceptions import AirflowFailException, AirflowSkipException

    from truthsieve.airflow.operators import classify
    from truthsieve.exceptions import BatchLockedError, ConfigError, InputError

    def raising(error):
        def call():
            raise error

        return call

    for transient in (ConnectionRefusedError("refused"), TimeoutError("slow"), OSError(5, "EIO"), BatchLockedError("locked")):
        with pytest.raises(type(transient)):
            classify(raising(transient))
    for permanent in (ConfigError("bad key"), InputError("bad file"), ZeroDivisionError("bug"), KeyError("bug"), FileNotFoundError("gone")):
        with pytest.raises(AirflowFailException, match=type(permanent).__name__):
            classify(raising(permanent))
    with pytest.raises(AirflowSkipException):
        classify(raising(AirflowSkipException("skip")))
    assert classify(lambda: 7) == 7


def test_a_config_error_fails_the_task_at_once(tmp_path, review_night):
    from airflow.sdk.exceptions import AirflowFailException

    from truthsieve.airflow import FitConsensusOperator

    bad = tmp_path / "bad.yaml"
    bad.write_text("rule_class: {kind: nonsense}\n")
    operator = FitConsensusOperator(task_id="fit", **{**review_night, "config_path": str(bad)})
    with pytest.raises(AirflowFailException, match="ConfigError"):
        operator.execute({})


@pytest.mark.parametrize(
    "rule_class, words",
    [({"kind": "listed"}, ["rule_class.kind 'listed'", "rule__<name>"]), ({"kind": "threshold", "features": ["protein_pct"]}, ["rule_class.features", "protein_pct"])],
)
def test_check_items_fails_at_once_with_the_clis_line_when_the_night_lacks_configured_columns(tmp_path, rule_class, words):
    # the items table has item_id, moisture_pct, falling_number_s: no rule__* column, no protein_pct.
    # The command line refuses this configuration before screening (exit 2, one line); the DAG
    # run must fail its check_items task at once (not retried) with the same line.
    from airflow.sdk.exceptions import AirflowFailException

    from truthsieve.airflow import CheckItemsOperator
    from truthsieve.airflow import storage
    from truthsieve.pipeline import night

    inbox, config, out = tmp_path / "inbox", write_config(tmp_path / "c.yaml", rule_class=rule_class), tmp_path / "out"
    write_batch(inbox, DATE, seed=5, n_items=12)
    refused = cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(config), "--out", str(tmp_path / "cli-out"))
    assert refused.returncode == 2 and len(refused.stderr.strip().splitlines()) == 1, refused.stderr
    line = refused.stderr.strip().removeprefix("error: ")
    assert all(w in line for w in words) and DATE in line
    paths = {"inbox": str(inbox), "batch_date": DATE, "config_path": str(config), "out": str(out)}
    night.start_night(storage.store_for(paths["inbox"], paths["out"]), DATE)
    with pytest.raises(AirflowFailException) as failed:
        CheckItemsOperator(task_id="check_items", **paths).execute({"ds": DATE})
    assert str(failed.value) == f"ConfigError: {line}"


def test_a_relative_local_uri_is_refused_instead_of_resolving_under_the_cwd(review_night):
    from airflow.sdk.exceptions import AirflowFailException

    from truthsieve.airflow import FitConsensusOperator

    operator = FitConsensusOperator(task_id="fit", **{**review_night, "out": "local://relative/out"})
    with pytest.raises(AirflowFailException, match="must be absolute"):
        operator.execute({})


def test_an_unreachable_smtp_server_is_retried_not_failed(monkeypatch, review_night):
    from airflow.sdk.exceptions import AirflowFailException

    smtp_env(monkeypatch, free_port())  # nothing listens there
    with pytest.raises(OSError) as raised:
        alerts_operator(review_night).execute({})
    assert not isinstance(raised.value, AirflowFailException)


def test_a_missing_smtp_connection_fails_at_once_naming_it(monkeypatch, review_night):
    from airflow.sdk.exceptions import AirflowFailException

    monkeypatch.delenv("AIRFLOW_CONN_SMTP_DEFAULT", raising=False)
    started = time.monotonic()
    with pytest.raises(AirflowFailException, match="smtp_default"):
        alerts_operator(review_night).execute({})
    assert time.monotonic() - started < 30  # no retry loop, no connect timeout


def test_send_mail_false_skips_without_a_connection(monkeypatch, review_night):
    from airflow.sdk.exceptions import AirflowSkipException

    monkeypatch.delenv("AIRFLOW_CONN_SMTP_DEFAULT", raising=False)
    with pytest.raises(AirflowSkipException, match="2 message"):
        alerts_operator(review_night, send_mail="False").execute({})


def test_a_retry_after_a_refused_message_sends_each_message_exactly_once(monkeypatch, review_night):
    from aiosmtpd.controller import Controller

    class RefuseSecondOnce:
        """Accepts messages, but answers the second DATA of its life with a 451."""

        def __init__(self):
            self.received, self.attempts = [], 0

        async def handle_DATA(self, server, session, envelope):
            self.attempts += 1
            if self.attempts == 2:
                return "451 4.3.0 try again later"
            self.received.append((tuple(envelope.rcpt_tos), envelope.content))
            return "250 OK"

    handler = RefuseSecondOnce()
    port = free_port()
    controller = Controller(handler, hostname="127.0.0.1", port=port)
    controller.start()
    try:
        smtp_env(monkeypatch, port)
        with pytest.raises(OSError):  # smtplib.SMTPDataError: a transient fault, so Airflow retries
            alerts_operator(review_night).execute({})
        assert len(handler.received) == 1
        assert alerts_operator(review_night).execute({}) == {"sent": 1, "already_sent": 1}
        assert alerts_operator(review_night).execute({}) == {"sent": 0, "already_sent": 2}  # a cleared task
    finally:
        controller.stop()
    recipients = sorted(r for rcpt, _ in handler.received for r in rcpt)
    assert recipients == ["platform@example.org", "south@example.org"]
    record = json.loads((Path(review_night["out"]) / f"batch_date={DATE}" / "alerts_sent.json").read_text())
    assert sorted(to for m in record["sent"] for to in m["to"]) == ["platform@example.org", "south@example.org"]


def run_night_by_operators(paths: dict) -> dict:
    """Every task of the DAG as its operator, called through execute() with a small context,
    in the DAG's order; returns each task's XCom value."""
    from truthsieve.airflow import (
        CheckItemsOperator,
        DecideAndPublishOperator,
        FitConsensusOperator,
        SourceIncentiveOperator,
        ValidateSourceOperator,
    )
    from truthsieve.airflow import storage
    from truthsieve.pipeline import night

    context = {"ds": paths["batch_date"]}
    folders = night.start_night(storage.store_for(paths["inbox"], paths["out"]), paths["batch_date"])
    xcom = {"check_items": CheckItemsOperator(task_id="check_items", **paths).execute(context)}
    xcom["validate_source"] = [ValidateSourceOperator(task_id="v", source_folder=f, **paths).execute(context) for f in folders]
    xcom["fit_consensus"] = FitConsensusOperator(task_id="fit", **paths).execute(context)
    valid = sorted(s["source_id"] for s in xcom["validate_source"] if s["valid"])
    xcom["source_incentive"] = [SourceIncentiveOperator(task_id="i", source_id=s, **paths).execute(context) for s in valid]
    xcom["decide_and_publish"] = DecideAndPublishOperator(task_id="d", **paths).execute(context)
    return xcom


def test_the_operators_one_step_each_publish_the_clis_night_and_xcom_stays_small(tmp_path, review_night, monkeypatch):
    monkeypatch.setenv("TRUTHSIEVE_DRAW_KEY", "operator-secret")  # read by the operator, at the edge
    cli_out = tmp_path / "cli-out"
    import os

    result = cli("screen", "--inbox", review_night["inbox"], "--date", DATE, "--config", review_night["config_path"], "--out", str(cli_out), env=os.environ.copy())
    assert result.returncode == 0, result.stderr
    paths = {**review_night, "out": str(tmp_path / "dag-out")}
    xcom = run_night_by_operators(paths)
    ours = (tmp_path / "dag-out" / f"batch_date={DATE}" / "decision.json").read_bytes()
    assert ours == (cli_out / f"batch_date={DATE}" / "decision.json").read_bytes()
    decision = json.loads(ours)
    assert decision["draw"]["key_source"] == "environment"
    assert xcom["check_items"] == {"valid": True, "errors": 0}
    assert xcom["decide_and_publish"]["route"] == decision["route"]
    assert xcom["decide_and_publish"]["flagged"] == [s["source_id"] for s in decision["sources"] if s["flags"]]
    assert xcom["fit_consensus"]["rule"] == decision["consensus"]["rule"]
    for value in xcom.values():
        assert len(json.dumps(value)) < 2000  # summaries, never tables


def test_a_source_validated_before_the_items_check_fails_at_once_naming_it(tmp_path, review_night):
    from airflow.sdk.exceptions import AirflowFailException

    from truthsieve.airflow import ValidateSourceOperator

    paths = {**review_night, "out": str(tmp_path / "fresh-out")}
    with pytest.raises(AirflowFailException, match="check_items"):
        ValidateSourceOperator(task_id="v", source_folder="source_id=south", **paths).execute({})


def test_fit_consensus_skips_a_night_without_a_valid_source(tmp_path):
    from airflow.sdk.exceptions import AirflowSkipException

    from truthsieve.airflow import FitConsensusOperator

    inbox, config = tmp_path / "inbox", write_config(tmp_path / "c.yaml")
    write_batch(inbox, DATE, seed=2)
    for labels in (inbox / f"batch_date={DATE}").glob("source_id=*/labels.parquet"):
        labels.write_bytes(b"not parquet")
    paths = {"inbox": str(inbox), "batch_date": DATE, "config_path": str(config), "out": str(tmp_path / "out")}
    from truthsieve.airflow import CheckItemsOperator, ValidateSourceOperator
    from truthsieve.pipeline import night
    from truthsieve.pipeline.store import LocalStore

    folders = night.start_night(LocalStore(inbox, tmp_path / "out"), DATE)
    CheckItemsOperator(task_id="c", **paths).execute({})
    assert not any(ValidateSourceOperator(task_id="v", source_folder=f, **paths).execute({})["valid"] for f in folders)
    with pytest.raises(AirflowSkipException, match="nothing to fit"):
        FitConsensusOperator(task_id="fit", **paths).execute({})


def test_every_operator_is_a_thin_shell_over_one_step():
    import inspect

    from truthsieve.airflow import operators

    classes = [operators.CheckItemsOperator, operators.ValidateSourceOperator, operators.FitConsensusOperator,
               operators.SourceIncentiveOperator, operators.DecideAndPublishOperator]
    for cls in classes:
        body = inspect.getsource(cls.run)
        assert len(body.strip().splitlines()) <= 15, cls.__name__
        assert body.count("night.") - body.count("night.draw_key_from_environment") == 1, cls.__name__  # one step
    assert len(inspect.getsource(operators._BatchOperator.execute).strip().splitlines()) <= 15
    from truthsieve.airflow.alerting import SendAlertsOperator

    body = inspect.getsource(SendAlertsOperator.run)
    assert len(body.strip().splitlines()) <= 15 and "night.send_alerts(" in body
    shell = Path(operators.__file__).parent
    assert not [p.name for p in shell.glob("*.py") if "pipeline.cli" in p.read_text()]  # no import of the CLI
