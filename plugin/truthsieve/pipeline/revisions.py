"""Draw revisions: the first published draw of a night stands.

``u`` is published with every decision. A re-screen of the same date (a late file, a
resubmission, a withdrawn folder) that reused it while the lottery's membership
changed would let a source that saw ``u`` pick the entry ``u`` selects. So:

* a re-screen with the same inputs (every input file's path and sha256), the same
  errors and notes (code, file, row, column: a stray or misnamed file that quarantined
  a source is not an input, but removing it changes the lottery's membership), the
  same quarantined sources, the same
  configuration (``config_sha256``) and the same key gives the same revision and a
  byte-identical ``decision.json``;
* a re-screen that differs, after a draw was published, becomes revision ``r + 1``:
  its ``u`` is ``HMAC-SHA256(key, "<date>#<r+1>")`` (see :mod:`truthsieve.core.draw`),
  the earlier draws stay listed in ``earlier_draws``, and its route is review
  (``draw_revised``), so it applies only after a person's verdict.
"""

from __future__ import annotations

import json
from collections.abc import Mapping

from truthsieve.pipeline.layout import batch_dir
from truthsieve.pipeline.outputs import as_location


def read_published_decision(out, batch_date: str) -> dict | None:
    """The decision already published for ``batch_date`` under ``out``, or None."""
    path = batch_dir(as_location(out), batch_date) / "decision.json"
    if not path.is_file():
        return None
    try:
        return json.loads(path.read_text())
    except ValueError:
        # Unreadable: its draw may have been seen, so treat it as a published draw
        # of unknown inputs; the re-screen becomes a new revision that needs a verdict.
        return {"draw": {"u": None}, "draw_revision": 0, "route": None}


def _input_digests(inputs) -> list[tuple[str, str]]:
    return sorted((f["path"], f["sha256"]) if isinstance(f, Mapping) else (f.path, f.sha256) for f in inputs)


def _entry(e, file: str) -> tuple[str, str, str, str]:
    """(code, path, row, column) of an error (``file``) or a note (``path``)."""
    d = e if isinstance(e, Mapping) else e.as_dict()
    return (str(d.get("code") or d.get("rule")), str(d.get(file)), repr(d.get("row")), repr(d.get("column")))


def _screened(previous: Mapping | None, intake) -> tuple:
    """Everything of a night that can change its lottery's membership or content, except the
    config and key: inputs, errors, notes and quarantined sources. From a published
    decision (``intake`` None) or from tonight's intake."""
    if intake is None:
        inputs, errors, notes = previous.get("inputs", []), previous.get("errors", []), previous.get("notes", [])
        quarantined = [q.get("source_id") for q in previous.get("quarantined", [])]
    else:
        inputs, errors = intake.inputs, intake.errors
        notes = intake.notes
        quarantined = [s.source_id for s in intake.quarantined] + ([None] if not intake.items.valid else [])
    return (
        _input_digests(inputs),
        sorted(_entry(e, "file") for e in errors),
        sorted(_entry(n, "path") for n in notes),
        sorted(repr(q) for q in quarantined),
    )


def draw_revision(
    previous: Mapping | None, intake, config_sha256: str, fingerprint: str
) -> tuple[int, list[dict]]:
    """(revision, earlier published draws) of tonight's draw, given the published decision.

    The first published draw of a date stands. Identical inputs, configuration and key
    give the previous revision again (so the decision is byte-identical); changed ones
    after a published draw give the next revision, whose route is review. While no draw
    has been published for the date (no ``u`` has been seen), the revision stays.
    """
    if previous is None:
        return 0, []
    revision = int(previous.get("draw_revision", (previous.get("draw") or {}).get("revision", 0)) or 0)
    earlier = [dict(d) for d in previous.get("earlier_draws", [])]
    published = previous.get("draw")
    same = (
        previous.get("config_sha256") == config_sha256
        and _screened(previous, None) == _screened(None, intake)
        and (published is None or published.get("key_fingerprint") == fingerprint)
    )
    if same or published is None:
        return revision, earlier
    earlier.append(
        {
            "revision": revision,
            "u": published.get("u"),
            "source_id": published.get("source_id"),
            "rule": published.get("rule"),
            "route": previous.get("route"),
            "config_sha256": previous.get("config_sha256"),
            "inputs": [{"path": p, "sha256": h} for p, h in _input_digests(previous.get("inputs", []))],
        }
    )
    return revision + 1, earlier
