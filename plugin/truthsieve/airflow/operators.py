"""Airflow operators: thin shells over :mod:`truthsieve.pipeline`.

Each operator resolves its (templated) locations, calls one pipeline function and
turns the outcome into the task's fate (:func:`classify`): transient I/O faults fail
with retry; bad input, configuration errors and bugs fail at once (``AirflowFailException``).
Data moves through files under ``<out>/.work/batch_date=<date>/`` on storage every
worker sees (see :mod:`truthsieve.airflow.storage`); XCom carries small summaries only.
Nothing heavy is imported until ``execute`` runs.
"""

from __future__ import annotations

import json
import os
from collections.abc import Sequence

from airflow.sdk import BaseOperator
from airflow.sdk.exceptions import AirflowFailException, AirflowSkipException

from truthsieve.airflow import storage


#: I/O faults a retry can cure; other OSErrors (a missing file, no permission) are permanent.
PERMANENT_OS_ERRORS = (FileNotFoundError, PermissionError, IsADirectoryError, NotADirectoryError)


def classify(call):
    """Run ``call``; turn every error that a retry cannot cure into ``AirflowFailException``.

    Retried (re-raised as is): transient I/O (``OSError`` such as ``ConnectionError``,
    ``TimeoutError``, an SMTP failure) other than :data:`PERMANENT_OS_ERRORS`, and
    ``BatchLockedError``. Failed at once: bad input and configuration, bugs, anything else.
    """
    from truthsieve.exceptions import BatchLockedError

    try:
        return call()
    except (AirflowFailException, AirflowSkipException):
        raise
    except BatchLockedError:
        raise
    except OSError as error:
        if isinstance(error, PERMANENT_OS_ERRORS):
            raise AirflowFailException(f"{type(error).__name__}: {error}") from error
        raise
    except Exception as error:
        raise AirflowFailException(f"{type(error).__name__}: {error}") from error


class _BatchOperator(BaseOperator):
    """Shared arguments of every truthsieve operator.

    :param inbox: inbox root: a path or URI (templated).
    :param batch_date: batch date, ``YYYY-MM-DD`` (templated).
    :param config_path: YAML configuration: a path or URI (templated).
    :param out: output root: a path or URI (templated).
    """

    template_fields: Sequence[str] = ("inbox", "batch_date", "config_path", "out")

    def __init__(self, *, inbox: str, batch_date: str, config_path: str, out: str, **kwargs) -> None:
        super().__init__(**kwargs)
        self.inbox = inbox
        self.batch_date = batch_date
        self.config_path = config_path
        self.out = out

    def execute(self, context):
        """Check the locations, then :meth:`run`, with errors classified by :func:`classify`."""
        def checked():
            for uri in (self.inbox, self.out, self.config_path):
                if storage.is_local(uri):
                    storage.local_path(uri)  # refuses a relative file:// or local:// URI
            return self.run(context)

        return classify(checked)

    def run(self, context):
        raise NotImplementedError

    def load_config(self):
        from truthsieve.pipeline.config import load_config

        return load_config(storage.location(self.config_path))

    @property
    def work(self):
        return storage.work_location(self.out, self.batch_date)


def _items_check(inbox: str, batch_date: str, out: str, config, compute: bool = False):
    """The night's items table: validated once per run by ``check_items`` (``compute``)
    and read back from the work folder by every later task."""
    import pandas as pd
    import pyarrow as pa

    from truthsieve.pipeline import ingest
    from truthsieve.pipeline.outputs import parquet_bytes

    work = storage.work_location(out, batch_date)
    summary_path, table_path = work / "items.json", work / "items.parquet"
    if not compute:
        if not summary_path.is_file():
            raise AirflowFailException("the items table was not checked in this run (task check_items)")
        table = pd.read_parquet(pa.BufferReader(table_path.read_bytes())) if table_path.is_file() else None
        return ingest.FileCheck.from_summary(json.loads(summary_path.read_text()), table)
    from truthsieve.pipeline.screen import validate_items

    if storage.is_local(inbox) and storage.is_local(out):
        from truthsieve.pipeline.locations import check_out_location

        check_out_location(storage.local_path(inbox), storage.local_path(out))
    with storage.local_inbox(inbox, batch_date, folders=("items.parquet",)) as root:
        check = validate_items(root, batch_date, config)
    if check.valid:
        storage.write_object(table_path, parquet_bytes(pa.Table.from_pandas(check.table, preserve_index=False)))
    storage.write_object(summary_path, json.dumps(check.summary(), sort_keys=True).encode())  # last: the marker
    return check


def _intake(inbox: str, batch_date: str, out: str, config):
    """Rebuild the night's validated intake from the work folder."""
    import pandas as pd
    import pyarrow as pa

    from truthsieve.pipeline import ingest
    from truthsieve.pipeline.screen import Intake

    intake = Intake(batch_date, _items_check(inbox, batch_date, out, config))
    sources = storage.work_location(out, batch_date) / "sources"
    for folder in storage.source_folders(inbox, batch_date):
        summary_path, table_path = sources / f"{folder}.json", sources / f"{folder}.parquet"
        if not summary_path.is_file():
            raise AirflowFailException(f"{folder} was not validated in this run")
        table = pd.read_parquet(pa.BufferReader(table_path.read_bytes())) if table_path.is_file() else None
        intake.sources.append(ingest.FileCheck.from_summary(json.loads(summary_path.read_text()), table))
    return intake


class CheckItemsOperator(_BatchOperator):
    """Validate the night's items table once, before the mapped source validations read it."""

    def run(self, context):
        check = _items_check(self.inbox, self.batch_date, self.out, self.load_config(), compute=True)
        return {"valid": check.valid, "errors": len(check.errors)}


class ValidateSourceOperator(_BatchOperator):
    """Validate one source folder of a night (mappable over ``source_folder``).

    :param source_folder: the ``source_id=<id>`` folder name (templated).
    """

    template_fields: Sequence[str] = (*_BatchOperator.template_fields, "source_folder")

    def __init__(self, *, source_folder: str, **kwargs) -> None:
        super().__init__(**kwargs)
        self.source_folder = source_folder

    def run(self, context):
        import pyarrow as pa

        from truthsieve.pipeline import ingest
        from truthsieve.pipeline.outputs import parquet_bytes
        from truthsieve.pipeline.screen import item_index

        config = self.load_config()
        item_ids, weights = item_index(_items_check(self.inbox, self.batch_date, self.out, config))
        with storage.local_inbox(self.inbox, self.batch_date, folders=(self.source_folder,)) as root:
            folder = ingest.batch_folder(root, self.batch_date) / self.source_folder
            check = ingest.validate_source(root, folder, config.registry, item_ids, weights)
        work = self.work / "sources"
        if check.valid:
            storage.write_object(work / f"{self.source_folder}.parquet", parquet_bytes(pa.Table.from_pandas(check.table, preserve_index=False)))
        storage.write_object(work / f"{self.source_folder}.json", json.dumps(check.summary(), sort_keys=True).encode())
        return {"source_id": check.source_id, "valid": check.valid, "errors": len(check.errors)}


class FitConsensusOperator(_BatchOperator):
    """Fit the consensus rule (ERM) on the valid sources; returns the rule and its risk."""

    def run(self, context):
        from truthsieve.pipeline.analysis import prepare

        config = self.load_config()
        intake = _intake(self.inbox, self.batch_date, self.out, config)
        if not (intake.items.valid and intake.valid_sources):
            raise AirflowSkipException("no valid items table or no valid source: nothing to fit")
        _, rule_class, consensus = prepare(intake.labels, intake.items.table, config)
        return {"rule": rule_class.describe(consensus.rule), "risk": consensus.risk, "sources": [s.source_id for s in intake.valid_sources]}


class SourceIncentiveOperator(_BatchOperator):
    """Gain bracket and cheapest lie of one source under the consensus fit (mappable over ``source_id``).

    :param source_id: the source to analyse (templated).
    """

    template_fields: Sequence[str] = (*_BatchOperator.template_fields, "source_id")

    def __init__(self, *, source_id: str, **kwargs) -> None:
        super().__init__(**kwargs)
        self.source_id = source_id

    def run(self, context):
        from dataclasses import asdict

        from truthsieve.core.incentives import source_incentive
        from truthsieve.pipeline.analysis import prepare

        config = self.load_config()
        intake = _intake(self.inbox, self.batch_date, self.out, config)
        matrix, rule_class, consensus = prepare(intake.labels, intake.items.table, config)
        index = matrix.source_ids.index(self.source_id)
        result = source_incentive(matrix, rule_class, consensus, index, config.analysis.incentive_budget)
        storage.write_object(self.work / "incentives" / f"{self.source_id}.json", json.dumps(asdict(result), sort_keys=True).encode())
        return {"source_id": self.source_id, "gain_lower": result.gain_lower, "gain_exact": result.gain_exact}


class DecideAndPublishOperator(_BatchOperator):
    """Route the batch and publish its outputs; returns route, flagged sources and where."""

    def run(self, context):
        from truthsieve.core.incentives import SourceIncentive
        from truthsieve.pipeline.cli import write_index
        from truthsieve.pipeline.outputs import date_lock, publish, read_history, recover
        from truthsieve.pipeline.report_history import recent_nights
        from truthsieve.pipeline.revisions import read_published_decision
        from truthsieve.pipeline.screen import decide, draw_key_from_environment, quarantine_copies
        from truthsieve.pipeline.verdicts import in_force_before, record_publication

        config = self.load_config()
        intake = _intake(self.inbox, self.batch_date, self.out, config)
        incentives = None
        if intake.items.valid and intake.valid_sources:
            folder = self.work / "incentives"
            incentives = [
                SourceIncentive(**json.loads((folder / f"{s}.json").read_text()))
                for s in sorted(c.source_id for c in intake.valid_sources)
            ]

        def decide_and_collect(out_location, in_force=None):
            history = read_history(out_location, self.batch_date, config.routing.drift_window)
            previous = read_published_decision(out_location, self.batch_date)
            decision, files, _ = decide(
                intake, config, history, incentives, in_force_before=in_force, previous=previous,
                recent=recent_nights(out_location, self.batch_date), draw_key=draw_key_from_environment(os.environ),
            )
            files.update(quarantine_copies(storage.location(self.inbox), intake))
            return decision, files

        if storage.is_local(self.out):
            out = storage.local_path(self.out)
            out.mkdir(parents=True, exist_ok=True)
            with date_lock(out, self.batch_date):
                recover(out, self.batch_date)
                decision, files = decide_and_collect(out, in_force_before(out, self.batch_date))
                output = publish(out, self.batch_date, files)
                record_publication(out, self.batch_date, files["decision.json"])
            write_index(out)
        else:
            # Object stores have no cross-process lock: the DAG's one active run is the writer.
            decision, files = decide_and_collect(storage.location(self.out))
            output = storage.publish_objects(self.out, self.batch_date, files)
            write_index(storage.location(self.out))
        flagged = [s["source_id"] for s in decision["sources"] if s["flags"]]
        return {"route": decision["route"], "flagged": flagged, "output": str(output)}
