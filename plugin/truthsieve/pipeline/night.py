"""One night, one orchestration: the steps of a night over a :class:`BatchStore`.

``start_night`` → ``check_items`` → ``validate_source`` (per source folder; :func:`validate_sources`
for all of them in one process) →
``fit_consensus`` → ``analyse_source`` (per valid source) → ``publish_night`` (decide,
publish, record, index) → ``send_alerts`` (Airflow only: the command line leaves the
messages in ``alerts.json``). :func:`screen_night` runs them in order in one process (the
command line); each Airflow operator runs exactly one of them. A step reads what the
steps before it wrote to the store's work area (:mod:`truthsieve.pipeline.work_files`),
or takes it as an argument when the caller already holds it, so one process never
re-reads its own work. Inbox files are read once, as bytes, at validation; quarantine
copies are those bytes. Nothing here reads the environment: the draw key is passed in.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from truthsieve.core.draw import DEMO_DRAW_KEY, DRAW_KEY_VARIABLE
from truthsieve.core.incentives import SourceIncentive, context_from_totals
from truthsieve.core.statistics import add_contribution
from truthsieve.exceptions import InputError
from truthsieve.pipeline import work_files
from truthsieve.pipeline.analysis import analyse_one_source, fit_from_totals, item_ranks, night_items, source_from_codes, source_weights
from truthsieve.pipeline.config import Config
from truthsieve.pipeline.decision import Decision
from truthsieve.pipeline.layout import ITEMS_FILE, batch_dir, source_name
from truthsieve.pipeline.night_fit import Fit, read_fit
from truthsieve.pipeline.night_inputs import ItemIndex, item_index, validate_items_at, validate_source_at, validate_sources_at
from truthsieve.pipeline.records import FileCheck, Intake

#: (key, is_demo_key) of the public demo key, used when an edge passes no secret.
DEMO_KEY = (DEMO_DRAW_KEY, True)


def draw_key_from_environment(environ: Mapping[str, str]) -> tuple[str, bool]:
    """(key, is_demo_key): the secret in ``TRUTHSIEVE_DRAW_KEY``, or the public demo key.

    Only the edges (the command line, the Airflow operator) call this and pass the key
    down; nothing below them reads the environment.
    """
    key = environ.get(DRAW_KEY_VARIABLE)
    return (key, False) if key else DEMO_KEY


# ---- the steps ----
def start_night(store, batch_date: str) -> list[str]:
    """Refuse a missing night, clear its work area; returns its source folders."""
    if not store.batch_exists(batch_date):
        raise InputError(f"{batch_dir(store.inbox, batch_date)}: no such batch folder")
    store.clear_work(batch_date)
    return store.source_folders(batch_date)


def check_items(store, batch_date: str, config: Config, columns_checked: bool = False) -> FileCheck:
    """Validate the items table once and write it (or its quarantine copy) to the work area.

    First the configuration's columns are checked against the night's items table
    (:func:`~truthsieve.pipeline.locations.check_configured_columns`, the command line's
    check): a configured feature, or with the listed class any ``rule__*`` column, that the
    table lacks is a :class:`~truthsieve.exceptions.ConfigError`, so an Airflow run fails
    here at once. An Airflow run sees one night; the command line checks the whole range
    of a backfill before it starts and passes ``columns_checked`` (a night lacking a column
    that other nights of its range have is that night's input error, not the configuration's).
    """
    from truthsieve.pipeline.locations import check_configured_columns

    store.check_locations()
    with store.local_inbox(batch_date, (ITEMS_FILE,)) as root:
        if not columns_checked:
            check_configured_columns(root, [batch_date], config)
        check = validate_items_at(root, batch_date, config)
        work_files.write_items(store, batch_date, check, work_files.quarantine_blob(root, check))
    return check


def validate_source(store, batch_date: str, folder: str, config: Config, index: ItemIndex | None = None) -> FileCheck:
    """Validate one source folder; write its labels (item codes) or its quarantine copy.

    :param index: the items index; read from the work area when None.
    """
    if index is None:
        index = item_index(work_files.read_items(store, batch_date))
    with store.local_inbox(batch_date, (folder,)) as root:
        check = validate_source_at(root, batch_date, folder, config, index)
        work_files.write_source(store, batch_date, folder, check, work_files.quarantine_blob(root, check))
    return check


def validate_sources(store, batch_date: str, folders: list[str], config: Config, index: ItemIndex | None) -> list[FileCheck]:
    """:func:`validate_source` of every folder in order, in one process (the command line):
    the same checks, records and work files; on a local inbox the folders' item-id joins
    are batched (:func:`~truthsieve.pipeline.night_inputs.validate_sources_at`)."""
    if not isinstance(store.inbox, Path):  # object storage: each folder copied and validated on its own
        return [validate_source(store, batch_date, f, config, index) for f in folders]
    checks = list(validate_sources_at(store.inbox, batch_date, folders, config, index))
    for folder, check in zip(folders, checks):
        work_files.write_source(store, batch_date, folder, check, work_files.quarantine_blob(store.inbox, check))
    return checks


def fit_consensus(store, batch_date: str, config: Config, intake: Intake | None = None) -> Fit | None:
    """The consensus fit (ERM) over the valid sources; None when there is nothing to fit.

    Each source's labels (its sufficient statistics, written by :func:`validate_source`)
    are read one at a time, weighted by the normalised weights known only here, and
    added into the night's ``(m, K)`` totals; the totals, the rules' global risks and the
    fit go to the work area for :func:`analyse_source`.

    :param intake: the night's validated intake (held by this process); read from the
        work area, one source at a time, when None.
    """
    if intake is not None:
        items = intake.items.table if intake.items.valid else None
        held = {s.source_id: s for s in intake.valid_sources}
        present = sorted(held)
        load = lambda source_id: (held[source_id].item_codes, held[source_id].labels)  # noqa: E731
    else:
        items_check = work_files.read_items(store, batch_date)
        items = items_check.table if items_check.valid else None
        folders = dict(work_files.valid_source_folders(store, batch_date))
        present = sorted(folders)
        load = lambda source_id: work_files.read_source_codes(store, batch_date, folders[source_id])  # noqa: E731
    if items is None or not present:
        return None
    night, ranks = night_items(items, config), item_ranks(items)
    weights = source_weights(config, present)
    totals = np.zeros((night.n_items, night.rule_class.n_classes))
    sources = {}
    for source_id in present:  # in source order, from zeros: the whole-night path's floats
        own = source_from_codes(source_id, *load(source_id), night, ranks, weights[source_id])
        add_contribution(totals, own)
        if intake is not None:
            sources[source_id] = own
    consensus = fit_from_totals(totals, night)
    global_risks = context_from_totals(totals, night.rule_class)
    record = {"rule": int(consensus.rule), "risk": float(consensus.risk), "weights": weights}
    work_files.write_night_fit(store, batch_date, totals, global_risks, record)
    return Fit(night, consensus, totals, global_risks, weights, ranks, sources)


def analyse_source(store, batch_date: str, config: Config, source_id: str, fit: Fit | None = None) -> SourceIncentive:
    """One source's gain bracket and cheapest lie from the night's totals, the fit and
    its own labels only; written to the work area.

    :param fit: from :func:`fit_consensus` or :func:`read_fit`; read from the work area when None.
    """
    fit = fit or read_fit(store, batch_date, config)
    if source_id not in fit.weights:
        raise InputError(f"{source_id!r} is not a valid source of the night {batch_date}")
    own = fit.sources.get(source_id)
    if own is None:
        rows, classes = work_files.read_source_codes(store, batch_date, source_name(source_id))
        own = source_from_codes(source_id, rows, classes, fit.night, fit.ranks, fit.weights[source_id])
    budget = config.analysis.incentive_budget
    result = analyse_one_source(fit.totals, own, fit.night, fit.consensus, budget, fit.global_risks)
    work_files.write_incentive(store, batch_date, result)
    return result


@dataclass(frozen=True)
class Published:
    """A published night: its typed decision and where its outputs are."""

    typed: Decision
    output: object
    decision: dict = field(repr=False, compare=False)  # its decision.json form, made once by the decide step

    @property
    def batch_date(self) -> str:
        return self.typed.batch_date

    @property
    def route(self) -> str:
        return self.typed.route

    def summary(self) -> dict:
        """What XCom carries: route, flagged sources, where."""
        return {"route": self.route, "flagged": self.typed.flagged, "output": str(self.output)}


def publish_night(
    store,
    batch_date: str,
    config: Config,
    draw_key: tuple[str, bool] = DEMO_KEY,
    intake: Intake | None = None,
    incentives: list[SourceIncentive] | None = None,
    index: bool = True,
    fit: Fit | None = None,
) -> Published:
    """Decide the night and publish its outputs atomically; record it; rewrite the index.

    :param draw_key: (secret, is_demo_key) from :func:`draw_key_from_environment`.
    :param intake, incentives: read from the work area when None.
    :param fit: the consensus step's :class:`Fit` when this process holds it (its rule
        class is reused, not rebuilt; so are its sparse labels, summed costs and fit when
        it holds every source's labels).
    :param index: rewrite ``index.html`` (a backfill writes it once at the end).
    """
    from truthsieve.pipeline.screen import decide_night

    intake = intake or work_files.read_intake(store, batch_date)
    if incentives is None and intake.items.valid and intake.valid_sources:
        incentives = work_files.read_incentives(store, batch_date, sorted(s.source_id for s in intake.valid_sources))
    with store.night(batch_date):
        decided = decide_night(
            intake, config, store.history(batch_date, config.routing.drift_window), incentives,
            in_force_before=store.in_force_before(batch_date), previous=store.published_decision(batch_date),
            recent=store.recent(batch_date), draw_key=draw_key, rule_class=None if fit is None else fit.rule_class, fit=fit,
        )
        files = {**decided.files, **work_files.quarantine_copies(store, intake)}
        output = store.publish(batch_date, files)
        store.record_publication(batch_date, files["decision.json"])
    if index:
        store.write_index()
    return Published(decided.decision, output, decided.as_json)


def alerts_of(store, batch_date: str) -> list[dict]:
    """The published night's alert messages (``alerts.json``)."""
    from truthsieve.pipeline.outputs import batch_location

    return json.loads((batch_location(store.out, batch_date) / "alerts.json").read_text())["messages"]


def send_alerts(store, batch_date: str, send: Callable[[dict], None]) -> dict:
    """Deliver each alert message once through ``send``, recording its sha256 in
    ``alerts_sent.json`` after each delivery (a retry skips what is recorded)."""
    from truthsieve.pipeline.outputs import batch_location, dumps_decision

    record = batch_location(store.out, batch_date) / "alerts_sent.json"
    sent = json.loads(record.read_text())["sent"] if record.is_file() else []
    done, messages, fresh = {entry["sha256"] for entry in sent}, alerts_of(store, batch_date), 0
    for message in messages:
        digest = hashlib.sha256(dumps_decision(message)).hexdigest()
        if digest in done:
            continue
        send(message)
        sent.append({**message, "sha256": digest})
        done.add(digest)
        fresh += 1
        store.record_alerts_sent(batch_date, dumps_decision({"batch_date": batch_date, "sent": sent}))
    return {"sent": fresh, "already_sent": len(messages) - fresh}


def screen_night(
    store, batch_date: str, config: Config, draw_key: tuple[str, bool] = DEMO_KEY, index: bool = True, workers: int | None = 1
) -> Published:
    """Every step of one night in order (the command line): in this process, but for the
    per-source analysis, which runs on a pool of ``workers`` processes when more than 1
    (None: the machine's cores for a night large enough; see :mod:`truthsieve.pipeline.source_pool`).
    The work area is held in memory (:meth:`BatchStore.work_in_memory`) and written to the store
    only for a pool.
    """
    from truthsieve.pipeline.source_pool import analyse_sources, start_context

    if workers is not None and workers > 1:
        start_context()  # the pool's server imports its modules while the night is validated
    with store.work_in_memory():  # one process: no other reads the work area, unless a pool
        folders = start_night(store, batch_date)
        try:
            items = check_items(store, batch_date, config, columns_checked=True)  # the command line checked its whole range
            items_index = item_index(items)
            intake = Intake(batch_date, items, validate_sources(store, batch_date, folders, config, items_index))
            fit = fit_consensus(store, batch_date, config, intake)
            incentives = None if fit is None else analyse_sources(store, batch_date, config, fit, workers)
            return publish_night(store, batch_date, config, draw_key, intake, incentives, index, fit)
        finally:
            store.clear_work(batch_date)
