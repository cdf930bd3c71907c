"""Airflow operators: thin shells over :mod:`truthsieve.pipeline`.

Each operator resolves its (templated) paths, calls one pipeline function and turns
the outcome into the task's fate: bad input fails without retry
(``AirflowFailException``), anything else (a transient I/O fault) fails with retry.
Data moves through files under ``<out>/.work/batch_date=<date>/``; XCom carries small
summaries only. Nothing heavy is imported until ``execute`` runs.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path

from airflow.sdk import BaseOperator
from airflow.sdk.exceptions import AirflowFailException, AirflowSkipException


def local_path(location: str) -> Path:
    """A ``file://`` URI or plain path as a local path (object storage: see the README)."""
    return Path(location.removeprefix("file://"))


def work_folder(out: str, batch_date: str) -> Path:
    return local_path(out) / ".work" / f"batch_date={batch_date}"


def _fail_on_bad_input(call):
    from truthsieve.exceptions import InputError

    try:
        return call()
    except InputError as error:
        raise AirflowFailException(str(error)) from error


class _BatchOperator(BaseOperator):
    template_fields: Sequence[str] = ("inbox", "batch_date", "config_path", "out")

    def __init__(self, *, inbox: str, batch_date: str, config_path: str, out: str, **kwargs) -> None:
        super().__init__(**kwargs)
        self.inbox = inbox
        self.batch_date = batch_date
        self.config_path = config_path
        self.out = out

    def load_config(self):
        from truthsieve.pipeline.config import load_config

        return _fail_on_bad_input(lambda: load_config(local_path(self.config_path)))


class ValidateSourceOperator(_BatchOperator):
    """Validate one source folder of a night (mappable over ``source_folder``).

    :param inbox: inbox root (templated).
    :param batch_date: batch date, ``YYYY-MM-DD`` (templated).
    :param config_path: YAML configuration (templated).
    :param out: output root; validated labels go to its work folder (templated).
    :param source_folder: the ``source_id=<id>`` folder name (templated).
    """

    template_fields: Sequence[str] = (*_BatchOperator.template_fields, "source_folder")

    def __init__(self, *, source_folder: str, **kwargs) -> None:
        super().__init__(**kwargs)
        self.source_folder = source_folder

    def execute(self, context):
        import pandas as pd

        from truthsieve.pipeline import ingest
        from truthsieve.pipeline.outputs import parquet_bytes, write_atomic

        config = self.load_config()
        inbox = local_path(self.inbox)
        items = _items_check(inbox, self.batch_date, self.out, config)
        item_ids = pd.Index(items.table["item_id"].to_numpy(dtype=object), dtype=object) if items.valid else None
        folder = ingest.batch_folder(inbox, self.batch_date) / self.source_folder
        check = ingest.validate_source(inbox, folder, config.registry, item_ids)
        work = work_folder(self.out, self.batch_date) / "sources"
        work.mkdir(parents=True, exist_ok=True)
        write_atomic(work / f"{self.source_folder}.json", json.dumps(check.summary(), sort_keys=True).encode())
        if check.valid:
            import pyarrow as pa

            write_atomic(work / f"{self.source_folder}.parquet", parquet_bytes(pa.Table.from_pandas(check.table, preserve_index=False)))
        return {"source_id": check.source_id, "valid": check.valid, "errors": len(check.errors)}


def _items_check(inbox: Path, batch_date: str, out: str, config):
    """The night's items table, validated once per run and kept in the work folder."""
    import pandas as pd
    import pyarrow as pa

    from truthsieve.pipeline import ingest
    from truthsieve.pipeline.outputs import parquet_bytes, write_atomic

    work = work_folder(out, batch_date)
    summary_path, table_path = work / "items.json", work / "items.parquet"
    if summary_path.is_file():
        table = pd.read_parquet(table_path) if table_path.is_file() else None
        return ingest.FileCheck.from_summary(json.loads(summary_path.read_text()), table)
    check = ingest.validate_items(inbox, batch_date, config.rule_class.features, config.rule_class.kind == "listed")
    work.mkdir(parents=True, exist_ok=True)
    if check.valid:
        write_atomic(table_path, parquet_bytes(pa.Table.from_pandas(check.table, preserve_index=False)))
    write_atomic(summary_path, json.dumps(check.summary(), sort_keys=True).encode())
    return check


class _WorkReader:
    """Rebuild a night's validated intake from the work folder."""

    @staticmethod
    def intake(inbox: Path, batch_date: str, out: str, config):
        import pandas as pd

        from truthsieve.pipeline import ingest
        from truthsieve.pipeline.screen import Intake

        intake = Intake(batch_date, _items_check(inbox, batch_date, out, config))
        work = work_folder(out, batch_date) / "sources"
        for folder in ingest.source_folders(inbox, batch_date):
            summary_path = work / f"{folder.name}.json"
            if not summary_path.is_file():
                raise AirflowFailException(f"{folder.name} was not validated in this run")
            table_path = work / f"{folder.name}.parquet"
            table = pd.read_parquet(table_path) if table_path.is_file() else None
            intake.sources.append(ingest.FileCheck.from_summary(json.loads(summary_path.read_text()), table))
        return intake


class FitConsensusOperator(_BatchOperator):
    """Fit the consensus rule (ERM) on the valid sources; returns the rule and its risk."""

    def execute(self, context):
        from truthsieve.pipeline.analysis import prepare

        config = self.load_config()
        intake = _WorkReader.intake(local_path(self.inbox), self.batch_date, self.out, config)
        if not (intake.items.valid and intake.valid_sources):
            raise AirflowSkipException("no valid items table or no valid source: nothing to fit")
        _, rule_class, consensus = _fail_on_bad_input(lambda: prepare(intake.labels, intake.items.table, config))
        return {"rule": rule_class.describe(consensus.rule), "risk": consensus.risk, "sources": [s.source_id for s in intake.valid_sources]}


class SourceIncentiveOperator(_BatchOperator):
    """Gain bracket and cheapest lie of one source under the consensus fit (mappable over ``source_id``).

    :param source_id: the source to analyse (templated).
    """

    template_fields: Sequence[str] = (*_BatchOperator.template_fields, "source_id")

    def __init__(self, *, source_id: str, **kwargs) -> None:
        super().__init__(**kwargs)
        self.source_id = source_id

    def execute(self, context):
        from dataclasses import asdict

        from truthsieve.core.incentives import source_incentive
        from truthsieve.pipeline.analysis import prepare
        from truthsieve.pipeline.outputs import write_atomic

        config = self.load_config()
        intake = _WorkReader.intake(local_path(self.inbox), self.batch_date, self.out, config)
        matrix, rule_class, consensus = _fail_on_bad_input(lambda: prepare(intake.labels, intake.items.table, config))
        index = matrix.source_ids.index(self.source_id)
        result = source_incentive(matrix, rule_class, consensus, index, config.analysis.incentive_budget)
        work = work_folder(self.out, self.batch_date) / "incentives"
        work.mkdir(parents=True, exist_ok=True)
        write_atomic(work / f"{self.source_id}.json", json.dumps(asdict(result), sort_keys=True).encode())
        return {"source_id": self.source_id, "gain_lower": result.gain_lower, "gain_exact": result.gain_exact}


class DecideAndPublishOperator(_BatchOperator):
    """Route the batch and publish its outputs atomically; returns route and flagged sources."""

    def execute(self, context):
        from truthsieve.core.incentives import SourceIncentive
        from truthsieve.pipeline.cli import write_index
        from truthsieve.pipeline.outputs import date_lock, publish, read_history, recover
        from truthsieve.pipeline.screen import decide, quarantine_copies

        config = self.load_config()
        inbox, out = local_path(self.inbox), local_path(self.out)
        intake = _WorkReader.intake(inbox, self.batch_date, self.out, config)
        incentives = None
        if intake.items.valid and intake.valid_sources:
            work = work_folder(self.out, self.batch_date) / "incentives"
            incentives = [
                SourceIncentive(**json.loads((work / f"{s}.json").read_text()))
                for s in sorted(c.source_id for c in intake.valid_sources)
            ]
        with date_lock(out, self.batch_date):
            recover(out, self.batch_date)
            history = read_history(out, self.batch_date, config.routing.drift_window)
            decision, files, _ = _fail_on_bad_input(lambda: decide(intake, config, history, incentives))
            files.update(quarantine_copies(inbox, intake))
            output = publish(out, self.batch_date, files)
        write_index(out)
        flagged = [s["source_id"] for s in decision["sources"] if s["flags"]]
        return {"route": decision["route"], "flagged": flagged, "output": str(output)}


class SendAlertsOperator(_BatchOperator):
    """Send the batch's ``alerts.json`` messages through an SMTP connection.

    Messages go through :class:`~airflow.providers.smtp.hooks.smtp.SmtpHook` as plain text
    wrapped in ``<pre>``: they carry source ids and reasons, which are never rendered as
    templates. Delivery is recorded in ``alerts_sent.json`` beside ``alerts.json``.
    """

    def execute(self, context):
        import html

        from airflow.providers.smtp.hooks.smtp import SmtpHook

        from truthsieve.pipeline.outputs import batch_output, date_lock, dumps_decision, write_atomic

        config = self.load_config()
        folder = batch_output(local_path(self.out), self.batch_date)
        messages = json.loads((folder / "alerts.json").read_text())["messages"]
        if not messages:
            raise AirflowSkipException("nothing to alert")
        with SmtpHook(smtp_conn_id=config.alerts.smtp_conn_id) as hook:
            for message in messages:
                hook.send_email_smtp(
                    to=message["to"],
                    subject=message["subject"],
                    html_content=f"<pre>{html.escape(message['body'])}</pre>",
                    from_email=config.alerts.from_address,
                )
        with date_lock(local_path(self.out), self.batch_date):
            write_atomic(folder / "alerts_sent.json", dumps_decision({"batch_date": self.batch_date, "sent": messages}))
        return {"sent": len(messages)}
