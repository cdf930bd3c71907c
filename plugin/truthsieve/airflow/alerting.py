"""Alerting the owners of flagged sources by SMTP, each message exactly once per night."""

from __future__ import annotations

import json
from collections.abc import Sequence

from airflow.sdk.exceptions import AirflowFailException, AirflowSkipException

from truthsieve.airflow import storage
from truthsieve.airflow.operators import _BatchOperator


class SendAlertsOperator(_BatchOperator):
    """Send the batch's ``alerts.json`` messages through an SMTP connection, each once.

    Messages go through :class:`~airflow.providers.smtp.hooks.smtp.SmtpHook` as plain text
    wrapped in ``<pre>``: they carry source ids and reasons, which are never rendered as
    templates. After each delivery the message's sha256 is recorded in ``alerts_sent.json``
    beside ``alerts.json`` (atomically); a retry or a cleared task skips recorded messages.
    A crash between the server's acceptance and the record can still resend that one message.

    :param send_mail: ``False`` (or the string ``"False"``, templated) records nothing and
        sends nothing: the task is skipped and the messages stay in ``alerts.json``.
    """

    template_fields: Sequence[str] = (*_BatchOperator.template_fields, "send_mail")

    def __init__(self, *, send_mail: bool | str = True, **kwargs) -> None:
        super().__init__(**kwargs)
        self.send_mail = send_mail

    def run(self, context):
        import hashlib
        import html

        from truthsieve.pipeline.outputs import batch_location, dumps_decision

        config = self.load_config()
        folder = batch_location(storage.location(self.out), self.batch_date)
        messages = json.loads((folder / "alerts.json").read_text())["messages"]
        if not messages:
            raise AirflowSkipException("nothing to alert")
        if str(self.send_mail).strip().lower() in ("false", "0", "no", "off"):
            raise AirflowSkipException(f"send_mail is off: {len(messages)} message(s) left unsent in alerts.json")
        hook = _smtp_hook(config.alerts.smtp_conn_id)
        record_path = folder / "alerts_sent.json"
        sent = json.loads(record_path.read_text())["sent"] if record_path.is_file() else []
        done = {entry["sha256"] for entry in sent}
        fresh = 0
        with hook:
            for message in messages:
                digest = hashlib.sha256(dumps_decision(message)).hexdigest()
                if digest in done:
                    continue
                hook.send_email_smtp(
                    to=message["to"],
                    subject=message["subject"],
                    # the composer escapes every value in "html"; older alerts.json had text only
                    html_content=message.get("html") or f"<pre>{html.escape(message['body'])}</pre>",
                    from_email=config.alerts.from_address,
                )
                sent.append({**message, "sha256": digest})
                done.add(digest)
                fresh += 1
                self._record(dumps_decision({"batch_date": self.batch_date, "sent": sent}))
        return {"sent": fresh, "already_sent": len(messages) - fresh}

    def _record(self, data: bytes) -> None:
        from truthsieve.pipeline.outputs import date_lock, write_atomic

        if storage.is_local(self.out):
            out = storage.local_path(self.out)
            with date_lock(out, self.batch_date):
                write_atomic(out / f"batch_date={self.batch_date}" / "alerts_sent.json", data)
        else:
            from truthsieve.pipeline.outputs import batch_location

            root = storage.location(self.out)
            storage.write_object(batch_location(root, self.batch_date) / "alerts_sent.json", data)
            storage.write_object(root / f"batch_date={self.batch_date}" / "alerts_sent.json", data)


def _smtp_hook(conn_id: str):
    """The SMTP hook, failing at once (no retry) when the connection is not defined."""
    from airflow.providers.smtp.hooks.smtp import SmtpHook
    from airflow.sdk import BaseHook
    from airflow.sdk.exceptions import AirflowNotFoundException

    try:
        BaseHook.get_connection(conn_id)
    except AirflowNotFoundException as error:
        raise AirflowFailException(
            f"SMTP connection {conn_id!r} is not defined (set AIRFLOW_CONN_{conn_id.upper()} or define it in Airflow), "
            "or run with the DAG param send_mail=false"
        ) from error
    return SmtpHook(smtp_conn_id=conn_id)
