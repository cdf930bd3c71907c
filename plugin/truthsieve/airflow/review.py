"""Review nights in Airflow: what the reviewer is asked, recording the answer, the asset's extra.

The DAG parks a review night in Airflow's human-in-the-loop task (``HITLOperator`` with the
options :data:`OPTIONS`, no ``defaults``): the subject and body come from
:func:`review_request`. :class:`RecordVerdictOperator` writes the answer to the out folder's
ledger with :func:`truthsieve.pipeline.verdicts.record_verdict`, the call the command line's
``truthsieve verdict`` makes. :func:`published_rule` is the ``extra`` of the asset event for
a night whose drawn rule was put in force (aggregated, or approved).

A review left unanswered until ``response_timeout`` fails the HITL task (no default
option, so a timeout can never approve); nothing is written to the ledger, the night stays
``awaiting_review``, the rule in force stays, and ``truthsieve verdict`` still records the
verdict later.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence

from airflow.sdk import BaseOperator

from truthsieve.airflow import storage
from truthsieve.airflow.operators import classify

APPROVE, REJECT = "Approve", "Reject"
OPTIONS = [APPROVE, REJECT]


def _night(out: str, batch_date: str):
    from truthsieve.pipeline.layout import batch_dir

    return batch_dir(storage.location(out), batch_date)


def _decision(out: str, batch_date: str) -> dict:
    return json.loads((_night(out, batch_date) / "decision.json").read_text())


def review_request(out: str, batch_date: str) -> dict:
    """``{"subject", "body"}`` (Markdown) of the review task for the night ``batch_date``."""
    from truthsieve.pipeline.report import rule_text

    decision = _decision(out, batch_date)
    draw = decision.get("draw") or {}
    reasons = "\n".join(
        f"- {'**blocking** ' if r.get('blocking') else ''}`{r['code']}`: {r['message']}" for r in decision.get("reasons", [])
    )
    night = _night(out, batch_date)
    rule = rule_text(draw.get("rule")) if draw.get("rule") else "none (no valid items table or source): only Reject applies"
    body = (
        f"Night **{batch_date}** was routed to review.\n\n"
        f"**Would apply if approved** (the strategy-proof draw, source `{draw.get('source_id', '-')}`): {rule}\n\n"
        f"Reject keeps the rule in force now. Why the night needs a person:\n\n{reasons or '- (no reasons recorded)'}\n\n"
        f"Report: `{night / 'report.html'}`\n\n"
        f"Optional: a note for the ledger. Instead of answering here: `truthsieve verdict --out {out} "
        f"--date {batch_date} --approve --by NAME` (or `--reject`)."
    )
    return {"subject": f"truthsieve: review night {batch_date} (approve its drawn rule or reject it)", "body": body}


def verdict_arguments(response: Mapping) -> dict:
    """``record_verdict``'s keyword arguments from the HITL task's result
    ``{chosen_options, params_input, responded_at, responded_by_user{id, name}}``."""
    from truthsieve.exceptions import VerdictError

    chosen = list(response.get("chosen_options") or [])
    user = response.get("responded_by_user") or {}
    if len(chosen) != 1 or chosen[0] not in OPTIONS:
        raise VerdictError(f"the review answer must be one of {OPTIONS}, not {chosen}")
    if not user.get("name"):
        raise VerdictError("the review answer names no user: a verdict needs a person (a timeout never decides)")
    at = response.get("responded_at")
    note = (response.get("params_input") or {}).get("note") or ""
    return {
        "approve": chosen[0] == APPROVE,
        "by": str(user["name"]),
        "note": f"{note} (via Airflow, user id {user.get('id')})".strip(),
        "at": at.isoformat() if hasattr(at, "isoformat") else str(at),
    }


def record_answer(out: str, batch_date: str, response: Mapping) -> dict:
    """Record the answer; a repeat of the same answer (a retried task) returns the rule in
    force unchanged, any other answer on a decided night is the pipeline's VerdictError."""
    from truthsieve.exceptions import VerdictError
    from truthsieve.pipeline.ledger import nights, read_ledger
    from truthsieve.pipeline.verdicts import in_force, record_verdict

    args = verdict_arguments(response)
    try:
        return record_verdict(out, batch_date, **args)
    except VerdictError:
        night = nights(read_ledger(out)).get(batch_date)
        done = night.decided_by if night is not None else None
        wanted = ("verdict", "approve" if args["approve"] else "reject", args["by"], args["at"])
        if done is not None and (done["event"], done["decision"], done["by"], done["at"]) == wanted:
            return in_force(out)
        raise


class RecordVerdictOperator(BaseOperator):
    """Write a review task's answer to the ledger; returns ``in_force.json``'s content.

    :param out: output root, a local path (templated; the ledger lives on local disk).
    :param batch_date: the night, ``YYYY-MM-DD`` (templated).
    :param response: the HITL task's result (pass ``review_task.output``).
    """

    template_fields: Sequence[str] = ("out", "batch_date", "response")

    def __init__(self, *, out: str, batch_date: str, response, **kwargs) -> None:
        super().__init__(**kwargs)
        self.out, self.batch_date, self.response = out, batch_date, response

    def execute(self, context):
        return classify(lambda: record_answer(str(storage.local_path(self.out)), self.batch_date, self.response))


def published_rule(out: str, batch_date: str, route: str) -> dict | None:
    """The asset event's ``extra`` when the night's drawn rule was put in force, else None.

    ``seq`` is the ledger line that put it in force (the publication of an aggregated night,
    the verdict of an approved one); ``in_force`` says whether it still is the rule in force
    (a backfilled earlier night's rule is superseded by a later one). Object-store outputs
    have no ledger: aggregated nights only, ``seq`` null.
    """
    if not storage.is_local(out):
        if route != "aggregate":
            return None
        draw = _decision(out, batch_date).get("draw") or {}
        return {"date": batch_date, "route": route, "status": "aggregated", "rule": draw.get("rule"), "seq": None, "by": None, "in_force": None}
    from truthsieve.pipeline.ledger import nights, read_ledger
    from truthsieve.pipeline.verdicts import in_force

    local = str(storage.local_path(out))
    night = nights(read_ledger(local)).get(batch_date)
    if night is None or not night.puts_in_force():
        return None
    by = night.decided_by
    current = in_force(local)
    return {
        "date": batch_date,
        "route": night.route,
        "status": night.status,
        "rule": night.rule,
        "seq": by["seq"] if by else night.published_seq,
        "by": by["by"] if by else None,
        "decision_sha256": night.decision_sha256,
        "in_force": current["since"] == batch_date,
        "in_force_seq": current["seq"],
    }
