"""Alerting the owners of flagged sources by SMTP, each message exactly once per night."""

from __future__ import annotations

from collections.abc import Sequence

from airflow.sdk.exceptions import AirflowFailException, AirflowSkipException

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
        from truthsieve.pipeline import night

        config, store = self.load_config(), self.store()
        messages = night.alerts_of(store, self.batch_date)
        if not messages:
            raise AirflowSkipException("nothing to alert")
        if str(self.send_mail).strip().lower() in ("false", "0", "no", "off"):
            raise AirflowSkipException(f"send_mail is off: {len(messages)} message(s) left unsent in alerts.json")
        hook = _smtp_hook(config.alerts.smtp_conn_id)
        with hook:
            return night.send_alerts(store, self.batch_date, lambda message: _send(hook, message, config.alerts.from_address))


def _send(hook, message: dict, from_address: str) -> None:
    import html

    # the composer escapes every value in "html"; older alerts.json had text only
    content = message.get("html") or f"<pre>{html.escape(message['body'])}</pre>"
    hook.send_email_smtp(to=message["to"], subject=message["subject"], html_content=content, from_email=from_address)


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
