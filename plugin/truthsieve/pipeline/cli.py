"""``truthsieve``: screen one night, backfill a range of nights, or run the built-in demo.

Exit codes: 0 a decision was written for every requested night (either route);
2 bad configuration or no batch to screen; 3 a batch date is locked by another run;
1 any other failure. No decision is ever half-written.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from truthsieve import __version__
from truthsieve.exceptions import BatchLockedError, ConfigError, InputError
from truthsieve.pipeline.locations import check_out_location
from truthsieve.pipeline.ledger_cli import LEDGER_COMMANDS, _date, _seconds, add_ledger_commands, run_ledger_command

if TYPE_CHECKING:
    from truthsieve.pipeline.decision import Decision

EXIT_OK, EXIT_FAILURE, EXIT_INPUT, EXIT_LOCKED = 0, 1, 2, 3


class _OneLineParser(argparse.ArgumentParser):
    """Usage errors as one line on stderr, exit 2 (``--help`` still shows the usage)."""

    def error(self, message: str):
        self.exit(EXIT_INPUT, f"error: {self.prog}: {message} (see {self.prog} --help)\n")


WORKERS_HELP = "processes for the per-source analysis (default: 1, in this process, below 500,000,000 labels, the machine's cores above)"


def _workers(text: str) -> int:
    """``--workers``: a whole number of processes, at least 1."""
    try:
        value = int(text)
    except ValueError:
        value = 0
    if value < 1:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number of processes >= 1")
    return value


OUT_HELP = "output root: a folder, or an object-store URL (s3://bucket/prefix, file:///abs/path, memory://x; needs Airflow)"


def _location(text: str) -> Path | str:
    """``--inbox``/``--out``: a local path, or a URL (``scheme://…``) kept as written; URLs
    are resolved only by :func:`_open_store` (Airflow is imported only then)."""
    return text if "://" in text else Path(text)


def _airflow_storage():
    """:mod:`truthsieve.airflow.storage`, the DAG's store code (imports Airflow: only for URLs)."""
    try:
        from truthsieve.airflow import storage
    except ImportError as error:
        raise ConfigError(f"object-store URLs need Airflow (pip install 'truthsieve[airflow]'): {error}") from None
    return storage


def _local_inbox(inbox: Path | str) -> Path:
    """The inbox as a local folder: ``file://``/``local://`` URLs become paths; other URLs
    are refused (the command line checks a night's columns before any work, on local files)."""
    if isinstance(inbox, Path):
        return inbox
    storage = _airflow_storage()
    try:
        local = storage.is_local(inbox)
    except (ValueError, ImportError) as error:
        raise ConfigError(f"--inbox {inbox}: {' '.join(str(error).split())}") from None
    if not local:
        raise ConfigError(f"--inbox {inbox}: the command line reads a local inbox (a folder or file:///abs/path); --out may be an object store")
    return storage.local_path(inbox)


def _open_store(inbox: Path, out: Path | str, lock_timeout: float):
    """Check ``--out`` against the inbox (creating it); a URL's store through the DAG's
    ``store_for`` (None for a plain path: :func:`screen` opens its local store)."""
    if isinstance(out, Path):
        check_out_location(inbox, out)
        return None
    return _airflow_storage().command_line_store(inbox, out, lock_timeout)


def build_parser() -> argparse.ArgumentParser:
    parser = _OneLineParser(
        prog="truthsieve",
        description="Screen nightly multi-source label batches before they shape a shared decision rule.",
        epilog="Exit codes: 0 decision(s) written; 2 bad configuration or missing batch; 3 batch locked; 1 other failure.",
    )
    parser.add_argument("--version", action="version", version=f"truthsieve {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    screen = commands.add_parser("screen", help="screen one night's batch and publish its decision")
    screen.add_argument("--inbox", required=True, type=_location, help="inbox root holding batch_date=YYYY-MM-DD/ folders (a folder or file:///abs/path)")
    screen.add_argument("--date", required=True, type=_date, help="batch date, YYYY-MM-DD")
    screen.add_argument("--config", required=True, type=Path, help="YAML configuration file")
    screen.add_argument("--out", required=True, type=_location, help=OUT_HELP)
    screen.add_argument("--lock-timeout", type=_seconds, default=600.0, help="seconds to wait for another run of the same date (default 600)")
    screen.add_argument("--json", action="store_true", help="print the decision as JSON instead of the summary")
    screen.add_argument("--workers", type=_workers, default=None, help=WORKERS_HELP)

    backfill = commands.add_parser("backfill", help="screen every night of a date range, oldest first")
    backfill.add_argument("--inbox", required=True, type=_location)
    backfill.add_argument("--from", dest="first", required=True, type=_date, help="first batch date, YYYY-MM-DD")
    backfill.add_argument("--to", dest="last", required=True, type=_date, help="last batch date, YYYY-MM-DD (inclusive)")
    backfill.add_argument("--config", required=True, type=Path)
    backfill.add_argument("--out", required=True, type=_location, help=OUT_HELP)
    backfill.add_argument("--lock-timeout", type=_seconds, default=600.0)
    backfill.add_argument("--workers", type=_workers, default=None, help=WORKERS_HELP)

    demo = commands.add_parser("demo", help="generate a demo inbox (if missing) and backfill its nights")
    demo.add_argument(
        "--scenario", choices=("grain", "grades"), default="grain",
        help="grain: accept/reject, 14 nights with verdicts (default); grades: four classes, 7 nights",
    )
    demo.add_argument("--out", type=Path, default=None, help="output root (default out/demo; out/grades for --scenario grades)")
    demo.add_argument("--inbox", type=Path, default=None, help="demo inbox (default: <out>-inbox)")
    add_ledger_commands(commands)
    return parser


def summary(decision: Decision, output: Path) -> str:
    """One screen of text: route, reasons, lottery, drawn rule, flagged sources, outputs."""
    from truthsieve.pipeline.report import rule_text

    classes = decision.classes
    lines = [f"batch {decision.batch_date}: route {decision.route.upper()}"]
    for reason in decision.reasons:
        mark = "!" if reason.blocking else "-"
        lines.append(f"  {mark} [{reason.code}] {reason.message}")
    mechanism, consensus, draw = decision.mechanism, decision.consensus, decision.draw
    if mechanism:
        lines.append(f"  consensus: {rule_text(consensus.rule, classes)} (risk {consensus.risk:.4f})")
        ratio = "n/a" if mechanism.ratio is None else f"{mechanism.ratio:.3f}"
        lines.append(
            f"  {mechanism.name}: {len(mechanism.lottery)} entries, expected risk {mechanism.expected_risk:.4f}, "
            f"ratio {ratio} (guarantee {mechanism.guarantee:.3f}{'' if mechanism.guarantee_applies else ', not applicable'})"
        )
        for entry in mechanism.lottery:
            lines.append(f"      p={entry.probability:.3f}  {entry.source_id or '-':<14} {rule_text(entry.rule, classes)}")
        status = "in force from tonight" if decision.route == "aggregate" else "would apply if approved; not in force"
        lines.append(f"  drawn (u={draw.u:.6f}, {status}): {draw.source_id or '-'}: {rule_text(draw.rule, classes)}")
    flagged = [f"{s.source_id} ({', '.join(s.flags)})" for s in decision.sources if s.flags]
    lines.append(f"  flagged: {'; '.join(flagged) if flagged else 'none'}")
    for q in decision.quarantined:
        lines.append(f"  quarantined: {q.source_id or 'items table'}: {len(q.files)} file(s)")
    lines.append(f"  outputs: {output}")
    return "\n".join(lines)


def _progress(done: int, total: int, label: str) -> None:
    width = 28
    filled = width * done // max(total, 1)
    sys.stderr.write(f"\r[{'#' * filled}{'.' * (width - filled)}] {done}/{total} {label:<12}")
    if done == total:
        sys.stderr.write("\n")
    sys.stderr.flush()


def write_index(out) -> Path:
    """Render ``index.html`` (see :func:`truthsieve.pipeline.store.write_index`)."""
    from truthsieve.pipeline.store import write_index as write

    return write(out)


def screen(inbox: Path, date: str, config, out, lock_timeout: float, workers: int | None = None, store=None):
    """Screen one night (:func:`~truthsieve.pipeline.night.screen_night`) with the draw key
    from the environment, read here at the edge: on ``store`` when given (a URL's, from
    :func:`_open_store`), else on a local store of ``out`` (:func:`truthsieve.pipeline.screen.screen`)."""
    from truthsieve.pipeline import screen as screening
    from truthsieve.pipeline.night import draw_key_from_environment, screen_night

    key = draw_key_from_environment(os.environ)
    if store is not None:
        return screen_night(store, date, config, key, index=False, workers=workers)
    return screening.screen(inbox, date, config, out, lock_timeout, draw_key=key, workers=workers)


def _check_features(inbox: Path, dates: Sequence[str], config) -> None:
    """Refuse, as a configuration error, columns the rule class's registry entry needs and no
    items table of the run's nights has (:func:`~truthsieve.pipeline.locations.check_configured_columns`)."""
    from truthsieve.pipeline.locations import check_configured_columns

    check_configured_columns(inbox, dates, config)


def _refuse_missing_batch(inbox: Path, date: str) -> None:
    from truthsieve.pipeline.layout import batch_dir

    if not batch_dir(inbox, date).is_dir():
        raise InputError(f"{batch_dir(inbox, date)}: no such batch folder")


def backfill(
    inbox: Path, dates: Sequence[str], config_path: Path | None, out: Path, lock_timeout: float, config=None, workers: int | None = None
) -> int:
    from truthsieve.pipeline.config import load_config
    from truthsieve.pipeline.layout import batch_dir

    config = config or load_config(config_path)
    inbox = _local_inbox(inbox)
    present = [d for d in dates if batch_dir(inbox, d).is_dir()]
    if not present:
        print(f"error: no batch folders under {inbox} for {dates[0]} to {dates[-1]}", file=sys.stderr)
        return EXIT_INPUT
    _check_features(inbox, present, config)
    store = _open_store(inbox, out, lock_timeout)  # last: a refused run leaves no --out folder behind
    results = []
    for k, date in enumerate(present):
        _progress(k, len(present), date)
        results.append(screen(inbox, date, config, out, lock_timeout, workers, store))
    _progress(len(present), len(present), "done")
    index = write_index(out) if store is None else store.write_index()
    routes = [r.route for r in results]
    print(f"{len(results)} nights screened: {routes.count('aggregate')} aggregated, {routes.count('review')} to review")
    for result in results:
        flags = len(result.typed.flagged)
        print(f"  {result.batch_date}  {result.route:<9}  flagged sources: {flags}")
    print()
    print(summary(results[-1].typed, results[-1].output))
    print(f"\nlast report: {results[-1].output / 'report.html'}")
    print(f"history:     {index}")
    return EXIT_OK


def run(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    from truthsieve.pipeline.config import load_config

    if args.command == "screen":
        config = load_config(args.config)
        inbox = _local_inbox(args.inbox)
        _refuse_missing_batch(inbox, args.date)
        _check_features(inbox, [args.date], config)
        store = _open_store(inbox, args.out, args.lock_timeout)  # last: a refused run leaves no --out folder behind
        result = screen(inbox, args.date, config, args.out, args.lock_timeout, args.workers, store)
        write_index(args.out) if store is None else store.write_index()
        print(json.dumps(result.decision, sort_keys=True, indent=2) if args.json else summary(result.typed, result.output))
        return EXIT_OK
    if args.command == "backfill":
        first, last = dt.date.fromisoformat(args.first), dt.date.fromisoformat(args.last)
        if last < first:
            print("error: --to is before --from", file=sys.stderr)
            return EXIT_INPUT
        dates = [(first + dt.timedelta(days=k)).isoformat() for k in range((last - first).days + 1)]
        return backfill(args.inbox, dates, args.config, args.out, args.lock_timeout, workers=args.workers)
    if args.command in LEDGER_COMMANDS:
        return run_ledger_command(args)
    from truthsieve.pipeline import demo

    out = args.out or demo.DEFAULT_OUT[args.scenario]
    story = demo.scenario(args.scenario)
    inbox = args.inbox or out.with_name(out.name + "-inbox")
    check_out_location(inbox, out)
    if not demo.batch_present(inbox, story.night_dates()[-1]):
        print(f"generating the demo inbox in {inbox}")
        story.generate_inbox(inbox)
    dates = story.night_dates()
    code = backfill(inbox, dates, None, out, 600.0, config=story.demo_config())
    if code == EXIT_OK and args.scenario == "grain":
        from truthsieve.pipeline.ledger_cli import finish_demo

        finish_demo(out, inbox)
    return code


def main(argv: Sequence[str] | None = None) -> int:
    try:
        code = run(argv)
        sys.stdout.flush()  # inside the try: a reader that went away is reported here
        return code
    except BatchLockedError as error:
        print(f"error: {error}", file=sys.stderr)
        return EXIT_LOCKED
    except InputError as error:
        print(f"error: {error}", file=sys.stderr)
        return EXIT_INPUT
    except BrokenPipeError:
        # the reader went away (e.g. ``| head``): no traceback, and no second error at exit
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_FAILURE


if __name__ == "__main__":
    sys.exit(main())
