"""The ledger's subcommands of ``truthsieve``: verdict, revoke, in-force, apply, ledger.

The clock is read here, at the edge: a verdict's ``at`` is the current UTC time.
Errors are raised as :class:`~truthsieve.exceptions.InputError` (exit 2, one line).
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
from pathlib import Path

from truthsieve.exceptions import InputError

LEDGER_COMMANDS = ("verdict", "revoke", "in-force", "apply", "ledger")


def _date(text: str) -> str:
    """A calendar date written exactly ``YYYY-MM-DD`` (Python also reads ``YYYYMMDD``: refused)."""
    try:
        if len(text) != 10 or text[4] != "-" or text[7] != "-":
            raise ValueError(text)
        return dt.date.fromisoformat(text).isoformat()
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a date of the form YYYY-MM-DD") from None


def _seconds(text: str) -> float:
    """A lock timeout: a non-negative, finite number of seconds."""
    try:
        value = float(text)
    except ValueError:
        value = -1.0
    if not (0.0 <= value < float("inf")):
        raise argparse.ArgumentTypeError(f"{text!r} is not a number of seconds (0 or more)")
    return value


def add_ledger_commands(commands) -> None:
    verdict = commands.add_parser("verdict", help="record a reviewer's approve or reject of a night awaiting review")
    verdict.add_argument("--out", required=True, type=Path, help="output root")
    verdict.add_argument("--date", required=True, type=_date, help="batch date, YYYY-MM-DD")
    verdict.add_argument("--approve", action="store_true", help="put the night's drawn rule in force")
    verdict.add_argument("--reject", action="store_true", help="keep the rule in force")
    verdict.add_argument("--by", required=True, help="the reviewer's name")
    verdict.add_argument("--note", default="", help="why (recorded in the ledger)")
    verdict.add_argument("--lock-timeout", type=_seconds, default=60.0)

    revoke = commands.add_parser("revoke", help="withdraw the rule an already published night put in force (human override)")
    revoke.add_argument("--out", required=True, type=Path)
    revoke.add_argument("--date", required=True, type=_date)
    revoke.add_argument("--by", required=True)
    revoke.add_argument("--note", required=True, help="why the mechanism's rule is overridden")
    revoke.add_argument("--lock-timeout", type=_seconds, default=60.0)

    in_force = commands.add_parser("in-force", help="show the rule in force")
    in_force.add_argument("--out", required=True, type=Path)
    in_force.add_argument("--as-of", type=_date, default=None, help="the rule in force on this night instead of now")
    in_force.add_argument("--json", action="store_true", help="print in_force.json's content")

    apply = commands.add_parser("apply", help="label an items table with the rule in force")
    apply.add_argument("--out", required=True, type=Path)
    apply.add_argument("--items", required=True, type=Path, help="items table (Parquet, the inbox's items schema)")
    apply.add_argument("--write", required=True, type=Path, help="Parquet file to write: item_id, label, rule")
    apply.add_argument("--as-of", type=_date, default=None, help="use the rule in force on this night")
    apply.add_argument("--config", type=Path, default=None, help="configuration whose classes the labels use (checked against the rule)")
    apply.add_argument("--labels", choices=("indices", "names"), default="indices", help="write class indices (default) or class names (needs --config)")

    ledger = commands.add_parser("ledger", help="check the ledger's hash chain, or list its events")
    ledger.add_argument("--out", required=True, type=Path)
    ledger.add_argument("--verify", action="store_true", help="check the chain; name the first broken line")


def _now() -> str:
    return dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")


def _night_classes(out: Path, date: str) -> list[str] | None:
    """The class names the night's decision.json names (None for binary nights or when unreadable)."""
    from truthsieve.pipeline.outputs import batch_location

    try:
        return json.loads((batch_location(out, date) / "decision.json").read_text(encoding="utf-8")).get("classes")
    except (OSError, ValueError):
        return None


def _describe(state: dict, out: Path) -> str:
    from truthsieve.pipeline.report import rule_text

    if state["rule"] is None:
        return "no rule in force: no night was aggregated or approved yet"
    event = state["event"]
    how = f"approved by {event['by']} at {event['at']}" if event["kind"] == "verdict" else "aggregated"
    return f"rule in force: {rule_text(state['rule'], _night_classes(out, state['since']))}\n  since night {state['since']} ({how}; ledger line {state['seq']})\n  decision sha256 {state['decision_sha256']}"


def finish_demo(out: Path, inbox: Path | None = None) -> None:
    """The rest of the demo's story after the 14 nights: the absent member's late file is
    delivered and its night screened again (a changed re-screen: review), the index is
    rewritten, the demo's reviewer records her verdicts; then the rule in force is printed."""
    from truthsieve.pipeline import demo, verdicts

    if inbox is not None:
        from truthsieve.pipeline.cli import summary, write_index
        from truthsieve.pipeline.screen import screen

        late = demo.deliver_late(inbox)
        date = demo.night_dates()[demo.ABSENT_NIGHT - 1]
        if late is not None:
            print(f"\n{demo.ABSENT} delivers its file for {date} late: {late}")
            result = screen(inbox, date, demo.demo_config(), out)
            print(summary(result.typed, result.output))
    print(f"\nverdicts of {demo.REVIEWER}:")
    for line in demo.record_demo_verdicts(out, _now()):
        print(f"  {line}")
    if inbox is not None:
        write_index(out)
    print(_describe(verdicts.in_force(out), out))


def verify_out_folder(out: Path) -> list[dict]:
    """The checked ledger entries of ``out``, after checking that the out folder exists, that
    the ledger and ``in_force.json`` are there when nights are published, and that every
    published ``decision.json`` has the sha256 of its night's latest ``night_published``.

    :raises InputError: one line naming what is missing or which night differs.
    """
    import hashlib

    from truthsieve.exceptions import LedgerBrokenError
    from truthsieve.pipeline import ledger
    from truthsieve.pipeline.layout import batch_name
    from truthsieve.pipeline.outputs import batch_location, published_dates

    if not Path(out).is_dir():
        raise InputError(f"no such out folder: {out}")
    dates = published_dates(out)
    for name in (ledger.LEDGER, ledger.IN_FORCE):
        if dates and not (Path(out) / name).is_file():
            raise LedgerBrokenError(f"{name} is missing from {out}, which holds {len(dates)} published nights")
    entries = ledger.read_ledger(out)
    latest = {e["date"]: e["decision_sha256"] for e in entries if e["event"] == "night_published"}
    for date in dates:
        sha = hashlib.sha256((batch_location(out, date) / "decision.json").read_bytes()).hexdigest()
        if date not in latest:
            raise LedgerBrokenError(f"night {date}: {batch_name(date)}/decision.json is published but the ledger has no night_published for it")
        if sha != latest[date]:
            raise LedgerBrokenError(
                f"night {date}: {batch_name(date)}/decision.json has sha256 {sha[:12]}..., not the {latest[date][:12]}... "
                "the ledger's latest night_published records (edited after publishing)"
            )
    return entries


def run_ledger_command(args) -> int:
    from truthsieve.pipeline import ledger, verdicts

    if args.command == "verdict":
        if args.approve == args.reject:
            raise InputError("verdict needs exactly one of --approve or --reject")
        state = verdicts.record_verdict(args.out, args.date, args.approve, args.by, args.note, _now(), args.lock_timeout)
        print(f"night {args.date}: {'approved' if args.approve else 'rejected'} by {args.by.strip()}")
        print(_describe(state, args.out))
        return 0
    if args.command == "revoke":
        state = verdicts.record_revocation(args.out, args.date, args.by, args.note, _now(), args.lock_timeout)
        print(f"night {args.date}: its rule revoked by {args.by.strip()} (human override of the mechanism)")
        print(_describe(state, args.out))
        return 0
    if args.command in ("in-force", "apply") and not Path(args.out).is_dir():
        raise InputError(f"no such out folder: {args.out}")  # a mistyped --out is not "no rule in force"
    if args.command == "in-force":
        state = verdicts.in_force(args.out, args.as_of)
        print(json.dumps(state, sort_keys=True, indent=2) if args.json else _describe(state, args.out))
        return 0
    if args.command == "apply":
        from truthsieve.pipeline.apply import apply_rule

        from truthsieve.pipeline.config import load_config

        classes = load_config(args.config).class_alphabet if args.config else None
        name = f"--config {args.config}" if args.config else "the configuration"
        result = apply_rule(args.out, args.items, args.write, args.as_of, classes, args.labels, name)
        print(f"{result['rows']} items labelled into {result['written']}")
        print(_describe(result, args.out))
        return 0
    if args.verify:
        entries = verify_out_folder(args.out)
        print(f"{ledger.LEDGER}: {len(entries)} lines, hash chain intact, every published night's decision.json matches it")
        return 0
    entries = ledger.read_ledger(args.out)
    for e in entries:
        detail = {k: v for k, v in e.items() if k not in ("seq", "prev", "sha256", "event", "date", "rule", "puts_in_force", "withdrawn_rule")}
        print(f"{e['seq']:>5}  {e['event']:<22} {e.get('date') or e.get('since') or '-':<10}  {json.dumps(detail, sort_keys=True)}")
    return 0
