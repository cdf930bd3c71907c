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
