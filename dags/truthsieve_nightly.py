"""
### truthsieve nightly screen

Screens the night's label batch: checks the items table once, validates each source's files (mapped over the source
folders present), fits the consensus rule, measures each source's incentive to misreport
(mapped over the valid sources), routes the batch to aggregation or review, publishes
the outputs and alerts the owners of flagged sources.

Params: `inbox`, `out`, `config` (absolute paths, `file:///` URIs or object-store URIs on
storage every worker sees); `send_mail` (default true; false skips `send_alerts`, so no
SMTP connection is needed, and the messages stay in `alerts.json`).
The batch date is the run's logical date (`ds`). Drift compares each night with the
nights before it, so nights must be screened in date order: the DAG allows one active
run, and backfills must too:
`airflow backfill create --dag-id truthsieve_nightly --from-date A --to-date B --max-active-runs 1`.
Downstream DAGs can be scheduled on the asset `truthsieve_published_aggregate`, which
gets an event only on nights that were aggregated.
"""

from __future__ import annotations

import os
from datetime import datetime, timedelta

from airflow.sdk import DAG, Asset, Param, task

from truthsieve.airflow import (
    CheckItemsOperator,
    DecideAndPublishOperator,
    FitConsensusOperator,
    SendAlertsOperator,
    SourceIncentiveOperator,
    ValidateSourceOperator,
)

PUBLISHED_AGGREGATE = Asset(name="truthsieve_published_aggregate")

with DAG(
    dag_id="truthsieve_nightly",
    schedule="@daily",
    start_date=datetime(2026, 1, 1),
    catchup=False,
    max_active_runs=1,  # drift reads earlier nights: screen nights in date order
    doc_md=__doc__,
    tags=["truthsieve", "labels"],
    # Retry delay from TRUTHSIEVE_RETRY_DELAY_S (tests set a short one); Airflow's default is 5 minutes.
    default_args={"retries": 2, "retry_delay": timedelta(seconds=float(os.environ.get("TRUTHSIEVE_RETRY_DELAY_S", "300")))},
    params={
        "inbox": Param(os.environ.get("TRUTHSIEVE_INBOX", "/data/truthsieve/inbox"), type="string"),
        "out": Param(os.environ.get("TRUTHSIEVE_OUT", "/data/truthsieve/out"), type="string"),
        "config": Param(os.environ.get("TRUTHSIEVE_CONFIG", "/data/truthsieve/config.yaml"), type="string"),
        # false: no mail and no SMTP connection needed; the messages stay in alerts.json
        "send_mail": Param(os.environ.get("TRUTHSIEVE_SEND_MAIL", "true").lower() != "false", type="boolean"),
    },
):
    paths = {"inbox": "{{ params.inbox }}", "batch_date": "{{ ds }}", "config_path": "{{ params.config }}", "out": "{{ params.out }}"}

    @task
    def list_source_folders(inbox: str, out: str, ds=None) -> list[str]:
        """The source folders of the night; clears this night's work folder."""
        from airflow.sdk.exceptions import AirflowFailException

        from truthsieve.airflow import storage

        if not storage.batch_exists(inbox, ds):
            raise AirflowFailException(f"no batch folder for {ds} under {inbox}")
        work = storage.work_location(out, ds)
        if work.exists():
            work.rmdir(recursive=True)
        return storage.source_folders(inbox, ds)

    @task
    def valid_source_ids(summaries: list[dict]) -> list[str]:
        return sorted(s["source_id"] for s in summaries if s["valid"])

    @task(outlets=[PUBLISHED_AGGREGATE])
    def announce_aggregate(result: dict) -> str:
        """Emit the asset event only when the night was aggregated."""
        from airflow.sdk.exceptions import AirflowSkipException

        if result["route"] != "aggregate":
            raise AirflowSkipException("routed to review: the previous rule stays published")
        return result["output"]

    folders = list_source_folders("{{ params.inbox }}", "{{ params.out }}")
    items = CheckItemsOperator(task_id="check_items", **paths)  # once per run, before the mapped tasks read it
    validated = ValidateSourceOperator.partial(task_id="validate_source", **paths).expand(source_folder=folders)
    folders >> items >> validated
    sources = valid_source_ids(validated.output)
    consensus = FitConsensusOperator(task_id="fit_consensus", **paths)
    incentives = SourceIncentiveOperator.partial(task_id="source_incentive", **paths).expand(source_id=sources)
    decided = DecideAndPublishOperator(task_id="decide_and_publish", trigger_rule="none_failed", **paths)
    alerts = SendAlertsOperator(task_id="send_alerts", send_mail="{{ params.send_mail }}", **paths)

    sources >> consensus >> incentives >> decided >> alerts
    announce_aggregate(decided.output)
