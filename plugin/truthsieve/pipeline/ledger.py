"""The out folder's ledger: an append-only, hash-chained record of nights and verdicts.

``<out>/ledger.jsonl`` holds one JSON object per line. Line ``k`` carries ``seq = k``,
``prev`` = the SHA-256 of line ``k - 1`` exactly as stored (without its newline; 64 zeros
for line 1) and ``sha256`` = the SHA-256 of its own canonical JSON without that key, so
editing, deleting or reordering a line breaks the chain at a line :func:`verify` names.
The last line is pinned by ``in_force.json`` (``ledger.lines`` and ``ledger.last_sha256``),
so even dropping the tail is seen.

Events (key ``event``):

* ``night_published`` - date, route, decision_sha256, revision, rule (the drawn rule or null)
* ``verdict`` - date, decision (approve | reject), by, note, at, decision_sha256, puts_in_force
* ``revoked`` - date, by, note, at, decision_sha256, override: a human override of the mechanism
* ``changed_after_verdict`` - date, verdict_seq, previous and new decision_sha256
* ``in_force`` - action (put | kept), rule, since, cause_seq, decision_sha256

:func:`derive` turns the events into the rule in force; it is pure (no files, no clock).
A night puts its drawn rule in force when its latest publication was aggregated, or was
routed to review and approved; a revocation withdraws it. A night a person decided (a
verdict or a revocation) whose latest publication has another decision sha256 awaits a
new verdict, whatever its route: a re-screen never undoes a person's decision by itself. The rule in force is that of
the latest such night (on or before ``as_of`` when given): later nights win, a rejected or
undecided review night leaves the previous rule standing.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

from truthsieve.exceptions import LedgerBrokenError
from truthsieve.pipeline.outputs import flock_file

LEDGER, IN_FORCE = "ledger.jsonl", "in_force.json"
GENESIS = "0" * 64
AGGREGATED, AWAITING, APPROVED, REJECTED, REVOKED = "aggregated", "awaiting_review", "approved", "rejected", "revoked"


def canonical(entry: Mapping) -> bytes:
    return json.dumps(entry, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False).encode()


def line_sha256(line: bytes) -> str:
    return hashlib.sha256(line).hexdigest()


def seal(entry: Mapping, seq: int, prev: str) -> bytes:
    """One ledger line (no newline) for ``entry`` at position ``seq`` after a line hashing to ``prev``."""
    body = {k: v for k, v in entry.items() if k not in ("seq", "prev", "sha256")}
    body.update(seq=seq, prev=prev)
    return canonical({**body, "sha256": line_sha256(canonical(body))})


def parse(data: bytes, head: Mapping | None = None) -> list[dict]:
    """Check the chain of the ledger's bytes and return its entries.

    :param head: ``{"lines", "last_sha256"}`` recorded in ``in_force.json``, if any.
    :raises LedgerBrokenError: naming the first broken line.
    """
    if data and not data.endswith(b"\n"):
        complete = data.count(b"\n")
        raise LedgerBrokenError(f"{LEDGER} line {complete + 1}: incomplete line (no newline at its end)")
    lines = data.split(b"\n")[:-1] if data else []
    entries, prev = [], GENESIS
    for k, line in enumerate(lines, start=1):
        try:
            entry = json.loads(line)
            if not isinstance(entry, dict):
                raise ValueError
        except ValueError:
            raise LedgerBrokenError(f"{LEDGER} line {k}: not a JSON object") from None
        body = {key: value for key, value in entry.items() if key != "sha256"}
        if entry.get("sha256") != line_sha256(canonical(body)):
            raise LedgerBrokenError(f"{LEDGER} line {k}: its content does not match its own sha256 (the line was edited)")
        if entry.get("seq") != k:
            raise LedgerBrokenError(f"{LEDGER} line {k}: carries seq {entry.get('seq')!r} (lines were removed or reordered)")
        if entry.get("prev") != prev:
            raise LedgerBrokenError(f"{LEDGER} line {k}: its prev hash does not match line {k - 1} (lines were removed, reordered or replaced)")
        entries.append(entry)
        prev = line_sha256(line)
    if head:
        recorded = int(head.get("lines", 0))
        if recorded > len(lines):
            raise LedgerBrokenError(f"{LEDGER} line {len(lines) + 1}: missing ({IN_FORCE} records {recorded} lines)")
        if recorded and line_sha256(lines[recorded - 1]) != head.get("last_sha256"):
            raise LedgerBrokenError(f"{LEDGER} line {recorded}: differs from the line {IN_FORCE} recorded")
    return entries


def read_head(out: str | Path) -> dict | None:
    path = Path(out) / IN_FORCE
    if not path.is_file():
        return None
    try:
        return json.loads(path.read_text()).get("ledger")
    except (ValueError, AttributeError):
        raise LedgerBrokenError(f"{path}: not a JSON object") from None


def read_ledger(out: str | Path) -> list[dict]:
    """The checked entries of ``<out>/ledger.jsonl`` (empty when there is none yet)."""
    head = read_head(out)  # before the ledger: writers replace the ledger first, then in_force.json
    path = Path(out) / LEDGER
    data = path.read_bytes() if path.is_file() else b""
    return parse(data, head)


def ledger_lock(out: str | Path, timeout: float = 60.0):
    """Exclusive lock of the out folder's ledger (``<out>/.locks/ledger.lock``), bounded wait."""
    return flock_file(Path(out) / ".locks" / "ledger.lock", f"the ledger of {out}", timeout)


def extend(data: bytes, events: Sequence[Mapping]) -> bytes:
    """The ledger's bytes with ``events`` sealed and appended (``data`` must be checked)."""
    lines = data.split(b"\n")[:-1] if data else []
    prev = line_sha256(lines[-1]) if lines else GENESIS
    out = bytearray(data)
    for k, event in enumerate(events, start=len(lines) + 1):
        line = seal(event, k, prev)
        out += line + b"\n"
        prev = line_sha256(line)
    return bytes(out)


# ---- deriving state from the events (pure) ------------------------------------------------


@dataclass(frozen=True)
class Night:
    """One night as the ledger sees it now."""

    date: str
    status: str
    route: str
    rule: dict | None
    decision_sha256: str
    published_seq: int
    decided_by: dict | None = None  # the verdict or revocation entry that applies

    def puts_in_force(self) -> bool:
        return self.rule is not None and self.status in (AGGREGATED, APPROVED)


def nights(entries: Sequence[Mapping]) -> dict[str, Night]:
    """Every published night's current state: its latest publication and the verdict on it."""
    published: dict[str, Mapping] = {}
    human: dict[str, list[Mapping]] = {}
    for entry in entries:
        if entry["event"] == "night_published":
            published[entry["date"]] = entry
        elif entry["event"] in ("verdict", "revoked"):
            human.setdefault(entry["date"], []).append(entry)
    out = {}
    for date, pub in sorted(published.items()):
        on_this = [h for h in human.get(date, []) if h["decision_sha256"] == pub["decision_sha256"]]
        verdicts = [h for h in on_this if h["event"] == "verdict"]
        revoked = [h for h in on_this if h["event"] == "revoked"]
        # a person decided an earlier publication of this night, and it changed since
        changed_after_human = bool(human.get(date)) and not on_this
        if revoked:
            status, by = REVOKED, revoked[-1]
        elif verdicts:
            status, by = (APPROVED if verdicts[-1]["decision"] == "approve" else REJECTED), verdicts[-1]
        elif pub["route"] == "aggregate" and not changed_after_human:
            status, by = AGGREGATED, None
        else:
            status, by = AWAITING, None
        out[date] = Night(date, status, pub["route"], pub.get("rule"), pub["decision_sha256"], pub["seq"], by)
    return out


def derive(entries: Sequence[Mapping], as_of: str | None = None) -> dict:
    """The rule in force (``in_force.json`` without its ``ledger`` head) after ``entries``,
    counting only nights on or before ``as_of`` when given."""
    candidates = [n for n in nights(entries).values() if n.puts_in_force() and (as_of is None or n.date <= as_of)]
    if not candidates:
        return {"rule": None, "since": None, "seq": None, "event": None, "decision_sha256": None}
    night = max(candidates, key=lambda n: n.date)
    cause = night.decided_by
    if cause is None:
        event = {"seq": night.published_seq, "kind": "night_published", "route": night.route}
    else:
        event = {"seq": cause["seq"], "kind": "verdict", "by": cause["by"], "at": cause["at"]}
    return {"rule": night.rule, "since": night.date, "seq": event["seq"], "event": event, "decision_sha256": night.decision_sha256}


def in_force_event(before: Mapping, after: Mapping, cause_seq: int) -> dict:
    """The ``in_force`` line that follows an event: was a rule put in force, or kept?"""
    put = (after["since"], after["seq"]) != (before["since"], before["seq"])
    return {
        "event": "in_force",
        "action": "put" if put else "kept",
        "rule": after["rule"],
        "since": after["since"],
        "cause_seq": cause_seq,
        "in_force_seq": after["seq"],
        "decision_sha256": after["decision_sha256"],
    }
