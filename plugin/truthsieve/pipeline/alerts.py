"""Compose the alert messages of a batch: one per flagged source, one digest.

Pure: returns plain dicts (recipient, subject, body). The Airflow shell sends them
through an SMTP connection; the pipeline writes them to ``alerts.json`` in the batch
folder so what was (or would be) sent is on record.
"""

from __future__ import annotations

from collections.abc import Mapping

from truthsieve.pipeline.config import Config
from truthsieve.pipeline.routing import FLAG_SENTENCES

CAUTION = (
    "Flags are evidence for a person to weigh, not a verdict on a source. Intake decisions "
    "remain subject to local grading standards and licensed graders."
)


def compose_alerts(decision: Mapping, config: Config) -> list[dict]:
    """Messages for the owners of flagged sources and the platform digest, in a fixed order."""
    registry = config.registry
    date = decision["batch_date"]
    messages = []
    flagged = [s for s in decision["sources"] if s["flags"]]
    for source in flagged:
        owner = registry[source["source_id"]].owner if source["source_id"] in registry else None
        if not owner:
            continue
        lines = [
            f"Batch {date}: the labels from {source['source_id']} were flagged.",
            "",
            *(f"- {code}: {FLAG_SENTENCES[code]}" for code in source["flags"]),
            "",
            f"Disagreement with the consensus rule: {source['disagreement']:.3f}",
            f"Route of the batch: {decision['route']}",
            "",
            CAUTION,
        ]
        messages.append(
            {
                "kind": "source",
                "source_id": source["source_id"],
                "to": [owner],
                "subject": f"[truthsieve] {date}: {source['source_id']} flagged ({', '.join(source['flags'])})",
                "body": "\n".join(lines),
            }
        )
    platform = config.alerts.platform_address
    if platform and (flagged or decision["route"] == "review"):
        lines = [f"Batch {date} was routed to {decision['route']}.", "", "Reasons:"]
        lines += [f"- [{r['code']}] {r['message']}" for r in decision["reasons"]] or ["- none"]
        lines += ["", CAUTION]
        messages.append(
            {
                "kind": "digest",
                "source_id": None,
                "to": [platform],
                "subject": f"[truthsieve] {date}: {decision['route']}, {len(flagged)} flagged source(s)",
                "body": "\n".join(lines),
            }
        )
    return messages
