"""Recording nights, reviewers' verdicts and revocations in the out folder's ledger.

Every function here is the one call a shell (the command line, an Airflow task) makes to
record one thing; the clock stays at that edge (``at`` is passed in). Each call appends
its events and an ``in_force`` line to ``<out>/ledger.jsonl`` under the ledger's lock,
then rewrites ``<out>/in_force.json`` atomically, and returns that file's content (the
rule in force, ``seq`` = the ledger line that put it in force, and the ledger head).

Lock order is always the batch date's lock, then the ledger's lock.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

from truthsieve.exceptions import VerdictError
from truthsieve.pipeline.ledger import (
    AWAITING,
    IN_FORCE,
    LEDGER,
    derive,
    extend,
    in_force_event,
    ledger_lock,
    line_sha256,
    nights,
    parse,
    read_head,
)
from truthsieve.pipeline.outputs import batch_output, date_lock, dumps_decision, write_atomic

REVIEW_NOTE = "The status mirrors <out>/ledger.jsonl, which holds every verdict; `truthsieve in-force` shows the rule in force."
OVERRIDE_NOTE = "human override of the mechanism: the night's published rule is withdrawn and the previous rule restored"


def _commit(out: str | Path, make_events: Callable[[list[dict]], list[dict]], lock_timeout: float) -> tuple[dict, list[dict]]:
    """Under the ledger lock: append ``make_events(entries)`` and the ``in_force`` line."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    with ledger_lock(out, lock_timeout):
        path = out / LEDGER
        data = path.read_bytes() if path.is_file() else b""
        entries = parse(data, read_head(out))
        events = make_events(entries)
        before = derive(entries)
        after = derive(parse(extend(data, events)))
        final = extend(data, [*events, in_force_event(before, after, len(entries) + 1)])
        write_atomic(path, final)
        lines = final.split(b"\n")[:-1]
        state = {**after, "ledger": {"lines": len(lines), "last_sha256": line_sha256(lines[-1])}}
        write_atomic(out / IN_FORCE, dumps_decision(state))
        return state, parse(final)


def _publication_events(entries: Sequence[Mapping], batch_date: str, decision_bytes: bytes) -> list[dict]:
    decision = json.loads(decision_bytes)
    sha = hashlib.sha256(decision_bytes).hexdigest()
    draw = decision.get("draw") or {}
    event = {
        "event": "night_published",
        "date": batch_date,
        "route": decision["route"],
        "decision_sha256": sha,
        "revision": 1 + sum(1 for e in entries if e["event"] == "night_published" and e["date"] == batch_date),
        "rule": draw.get("rule"),
    }
    if "revision" in draw:
        event["draw_revision"] = draw["revision"]
    events = [event]
    prior = nights(entries).get(batch_date)
    if prior is not None and prior.decided_by is not None and prior.decision_sha256 != sha:
        events.append(
            {
                "event": "changed_after_verdict",
                "date": batch_date,
                "verdict_seq": prior.decided_by["seq"],
                "verdict": prior.status,
                "previous_decision_sha256": prior.decision_sha256,
                "decision_sha256": sha,
            }
        )
    return events


def _sync_review_file(out: str | Path, batch_date: str, entries: Sequence[Mapping]) -> None:
    """Make ``review.json``'s status match the ledger (call under the date lock)."""
    path = batch_output(out, batch_date) / "review.json"
    night = nights(entries).get(batch_date)
    if night is None:
        return
    if path.is_file():
        review = json.loads(path.read_text())
    elif night.status == AWAITING and night.route == "aggregate":  # changed after a person's decision
        review = {"batch_date": batch_date, "blocking_reasons": [], "changed_after_verdict": True}
    else:
        return
    by = night.decided_by
    review["status"] = night.status
    review["verdict"] = None if by is None else {k: by.get(k) for k in ("event", "decision", "by", "note", "at", "seq")}
    review["note"] = REVIEW_NOTE
    data = dumps_decision(review)
    if not path.is_file() or path.read_bytes() != data:
        write_atomic(path, data)


def record_publication(out: str | Path, batch_date: str, decision_bytes: bytes, lock_timeout: float = 60.0) -> dict:
    """Ledger a night just published (call under the date's lock, after the publish).

    Appends ``night_published``, ``changed_after_verdict`` when a re-screen changed a
    night a person had decided, and the ``in_force`` line. Returns ``in_force.json``.
    """
    state, entries = _commit(out, lambda entries: _publication_events(entries, batch_date, decision_bytes), lock_timeout)
    _sync_review_file(out, batch_date, entries)
    return state


def _published_decision(out: str | Path, batch_date: str) -> bytes:
    path = batch_output(out, batch_date) / "decision.json"
    if not path.is_file():
        raise VerdictError(f"no night {batch_date} under {out}: nothing was published for that date")
    return path.read_bytes()


def _with_publication(entries: list[dict], batch_date: str, decision_bytes: bytes) -> tuple[list[dict], list[dict]]:
    """Ledger the decision on disk first if the ledger does not hold it (older out folders)."""
    sha = hashlib.sha256(decision_bytes).hexdigest()
    current = nights(entries).get(batch_date)
    if current is not None and current.decision_sha256 == sha:
        return [], entries
    events = _publication_events(entries, batch_date, decision_bytes)
    numbered = [{**e, "seq": len(entries) + k} for k, e in enumerate(events, start=1)]
    return events, entries + numbered


def _reviewer(by: str) -> str:
    by = (by or "").strip()
    if not by:
        raise VerdictError("--by must name the reviewer")
    return by


def record_verdict(
    out: str | Path, batch_date: str, approve: bool, by: str, note: str | None, at: str, lock_timeout: float = 60.0
) -> dict:
    """Record a reviewer's verdict on a night awaiting review; returns ``in_force.json``.

    Approval puts the night's drawn rule (the strategy-proof outcome) in force unless a
    later night's rule already is; rejection keeps the rule in force.

    :param at: when the reviewer decided (ISO 8601, taken from the clock by the caller).
    :raises VerdictError: unknown date, a night not awaiting review, approval of a night without a rule.
    """
    by = _reviewer(by)

    def events(entries, decision_bytes):
        published, view = _with_publication(entries, batch_date, decision_bytes)
        night = nights(view)[batch_date]
        if night.status != AWAITING:
            who = f" by {night.decided_by['by']}" if night.decided_by else ""
            raise VerdictError(f"night {batch_date} is not awaiting review (it is {night.status.replace('_', ' ')}{who})")
        if approve and night.rule is None:
            raise VerdictError(f"night {batch_date} has no drawn rule to approve (no valid items table or source); reject it")
        verdict = {
            "event": "verdict",
            "date": batch_date,
            "decision": "approve" if approve else "reject",
            "by": by,
            "note": note or "",
            "at": at,
            "decision_sha256": night.decision_sha256,
            "puts_in_force": night.rule if approve else None,
        }
        return [*published, verdict]

    return _record_decision(out, batch_date, events, lock_timeout)


def record_revocation(out: str | Path, batch_date: str, by: str, note: str, at: str, lock_timeout: float = 60.0) -> dict:
    """Withdraw the rule a published night put in force (a recorded human override of the
    mechanism, for a night flagged after publication); the previous rule is restored."""
    by = _reviewer(by)
    if not (note or "").strip():
        raise VerdictError("--note must say why the night's rule is revoked")

    def events(entries, decision_bytes):
        published, view = _with_publication(entries, batch_date, decision_bytes)
        night = nights(view)[batch_date]
        if not night.puts_in_force():
            raise VerdictError(f"night {batch_date} put no rule in force (it is {night.status.replace('_', ' ')}); nothing to revoke")
        return [
            *published,
            {
                "event": "revoked",
                "date": batch_date,
                "by": by,
                "note": note,
                "at": at,
                "decision_sha256": night.decision_sha256,
                "override": OVERRIDE_NOTE,
                "withdrawn_rule": night.rule,
            },
        ]

    return _record_decision(out, batch_date, events, lock_timeout)


def _record_decision(out: str | Path, batch_date: str, events, lock_timeout: float) -> dict:
    """Append ``events(entries, published decision bytes)`` under the date's lock, then bring
    review.json and the index up to date; returns the new in_force.json content."""
    if not Path(out).is_dir():  # nothing was ever published there: leave no lock folder behind
        raise VerdictError(f"{out}: no such out folder (no night was published there)")
    with date_lock(out, batch_date, lock_timeout):
        decision_bytes = _published_decision(out, batch_date)
        state, entries = _commit(out, lambda entries: events(entries, decision_bytes), lock_timeout)
        _sync_review_file(out, batch_date, entries)
    _refresh_index(out)
    return state


def _refresh_index(out: str | Path) -> None:
    from truthsieve.pipeline.store import write_index

    write_index(Path(out))


def in_force(out: str | Path, as_of: str | None = None) -> dict:
    """The rule in force now (``in_force.json``'s content, checked against the ledger), or
    on night ``as_of`` by replaying the ledger."""
    from truthsieve.pipeline.ledger import read_ledger

    entries = read_ledger(out)
    state = derive(entries, as_of)
    if as_of is None and (Path(out) / IN_FORCE).is_file():
        recorded = json.loads((Path(out) / IN_FORCE).read_text())
        if {k: recorded.get(k) for k in state} == state:
            return recorded
    return state


def in_force_before(out: str | Path, batch_date: str) -> dict:
    """The rule in force from the nights before ``batch_date`` (for that night's report)."""
    import datetime as dt

    from truthsieve.pipeline.ledger import read_ledger

    previous = (dt.date.fromisoformat(batch_date) - dt.timedelta(days=1)).isoformat()
    return derive(read_ledger(out), previous)
