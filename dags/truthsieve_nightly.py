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
gets an event on every night whose drawn rule was put in force: aggregated nights, and
review nights once approved. Its `extra` carries the night, the rule, `seq` (the line of
`<out>/ledger.jsonl` that put it in force), who approved it and whether it is still in force.

Review nights wait in `review_night` (Airflow's human-in-the-loop task, options Approve /
Reject, in the UI's "Required actions") for at most `TRUTHSIEVE_REVIEW_TIMEOUT_H` hours
(default 20); `record_verdict` writes the answer to the ledger like `truthsieve verdict`.
A timeout fails `review_night` and records nothing: the night stays awaiting review, the
rule in force stays, and `truthsieve verdict` can still decide it.
"""

from __future__ import annotations

import os
from datetime import datetime, timedelta

from airflow.providers.standard.operators.hitl import HITLOperator
from airflow.sdk import DAG, Asset, Param, task

from truthsieve.airflow import (
    CheckItemsOperator,
    DecideAndPublishOperator,
    FitConsensusOperator,
    RecordVerdictOperator,
    SendAlertsOperator,
    SourceIncentiveOperator,
    ValidateSourceOperator,
    review,
    storage,
)

PUBLISHED_AGGREGATE = Asset(name="truthsieve_published_aggregate")
# How long a review night waits for a person (TRUTHSIEVE_REVIEW_TIMEOUT_H): under a day, so
# the next night's run (one active run at a time) is not held back for long.
REVIEW_TIMEOUT = timedelta(hours=float(os.environ.get("TRUTHSIEVE_REVIEW_TIMEOUT_H", "20")))

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
        """The source folders of the night (step start_night, which clears its work area)."""
        from truthsieve.airflow.operators import classify
        from truthsieve.pipeline import night

        return classify(lambda: night.start_night(storage.store_for(inbox, out), ds))

    @task
    def valid_source_ids(summaries: list[dict]) -> list[str]:
        return sorted(s["source_id"] for s in summaries if s["valid"])

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

    # ---- the tail: a review night waits for a person; the published rule's asset event ----
    @task.branch
    def route_review(result: dict, out: str, ds=None, ti=None):
        """Review nights (local out folder, where the ledger lives) go to `review_night`."""
        if result["route"] != "review" or not storage.is_local(out):
            return None  # skips review_night and record_verdict; announce_aggregate still runs
        ti.xcom_push(key="review", value=review.review_request(out, ds))
        return "review_night"

    ask = "{{ ti.xcom_pull(task_ids='route_review', key='review')['%s'] }}"
    answer = HITLOperator(
        task_id="review_night",
        subject=ask % "subject",
        body=ask % "body",
        options=review.OPTIONS,  # no defaults: a timeout fails this task and never approves
        params={"note": Param("", type="string", description="optional note for the ledger")},
        response_timeout=REVIEW_TIMEOUT,
        retries=0,  # a retry would ask again after the timeout
    )
    recorded = RecordVerdictOperator(task_id="record_verdict", out="{{ params.out }}", batch_date="{{ ds }}", response=answer.output)

    @task(outlets=[PUBLISHED_AGGREGATE], trigger_rule="none_failed_min_one_success")
    def announce_aggregate(result: dict, out: str, ds=None, outlet_events=None) -> str:
        """Emit the asset event when the night's drawn rule was put in force (aggregated, or
        approved), with the rule and its ledger line in the event's extra."""
        from airflow.sdk.exceptions import AirflowSkipException

        extra = review.published_rule(out, ds, result["route"])
        if extra is None:
            raise AirflowSkipException("the night put no rule in force: the previous rule stays published")
        outlet_events[PUBLISHED_AGGREGATE].extra = {**extra, "output": result["output"]}
        return result["output"]

    route_review(decided.output, "{{ params.out }}") >> answer >> recorded
    recorded >> announce_aggregate(decided.output, "{{ params.out }}")
