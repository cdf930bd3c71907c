"""Where one night's files live: :class:`BatchStore` and its local implementation.

A store joins an inbox root and an output root (path objects: :class:`pathlib.Path`, or
any object-store path with the same interface, such as Airflow's ``ObjectStoragePath``)
and offers what the steps of a night (:mod:`truthsieve.pipeline.night`) need: reading
the inbox, the work area shared by a night's tasks, a night's exclusive section,
atomic publish, recovery, history and the index. :class:`LocalStore` publishes through
:mod:`truthsieve.pipeline.outputs` (revision folder + one symlink swap, under a per-date
lock); the object-store implementation (revision prefix + pointer) is
``truthsieve.airflow.storage.ObjectStore``. Folder names come from
:mod:`truthsieve.pipeline.layout` only.
"""

from __future__ import annotations

import contextlib
import json
import shutil
import tempfile
from collections.abc import Callable, Iterator, Mapping, Sequence
from pathlib import Path

from truthsieve.pipeline import layout
from truthsieve.pipeline.layout import ITEMS_FILE, batch_dir, work_dir
from truthsieve.pipeline.outputs import as_location, batch_location, published_dates, read_history


#: one work file's content: its bytes, or a function that makes them (it must read only
#: data that nothing changes afterwards: a held function may run at any later moment)
Work = bytes | Callable[[], bytes]


class BatchStore:
    """The inbox, work area and outputs of a run (subclasses implement the writes).

    :param inbox: inbox root (a path object).
    :param out: output root (a path object).
    :param run: a private work area name (a command-line screen uses its own, so two
        screens of one date never share work files); None: the night's shared one.
    """

    def __init__(self, inbox, out, run: str | None = None) -> None:
        self.inbox, self.out, self.run = as_location(inbox), as_location(out), run
        self._held: dict[tuple[str, str], Work] | None = None

    # ---- the inbox ----
    def batch_exists(self, batch_date: str) -> bool:
        return batch_dir(self.inbox, batch_date).is_dir()

    def source_folders(self, batch_date: str) -> list[str]:
        """Names of the night's ``source_id=*`` folders, sorted."""
        batch = batch_dir(self.inbox, batch_date)
        return sorted(p.name for p in batch.iterdir() if p.name.startswith(layout.SOURCE_PREFIX) and p.is_dir())

    @contextlib.contextmanager
    def local_inbox(self, batch_date: str, folders: Sequence[str] = ()) -> Iterator[Path]:
        """A local inbox root holding the night's items table and the named source folders
        (all of them when none are named). A local inbox is used in place, never copied."""
        if isinstance(self.inbox, Path):
            yield self.inbox
            return
        batch = batch_dir(self.inbox, batch_date)
        with tempfile.TemporaryDirectory(prefix="truthsieve-inbox-") as scratch:
            root = Path(scratch)
            for remote in batch.rglob("*"):
                relative = Path(str(remote.relative_to(batch)))
                if not remote.is_file() or (folders and relative.parts[0] != ITEMS_FILE and relative.parts[0] not in folders):
                    continue
                target = batch_dir(root, batch_date) / relative
                target.parent.mkdir(parents=True, exist_ok=True)
                with remote.open("rb") as source, open(target, "wb") as sink:
                    shutil.copyfileobj(source, sink)
            yield root

    # ---- the work area ----
    def work(self, batch_date: str):
        return work_dir(self.out, batch_date, self.run)

    @contextlib.contextmanager
    def work_in_memory(self) -> Iterator[None]:
        """Hold the work area in memory inside the block: for one process that runs every
        step (the command line), where no other process reads it. :meth:`spill_work`
        writes it out when other processes must (a pool of workers). Work given as a
        function is held as that function and made only if it is read or spilled."""
        previous = self._held
        self._held = {} if previous is None else previous  # nested: the outer block's work stays held
        try:
            yield
        finally:
            self._held = previous

    def spill_work(self, batch_date: str) -> None:
        """Write the held work area to the store and stop holding it: ``batch_date``'s first,
        then any other night's held work (none is dropped), in the order it was written."""
        held, self._held = self._held or {}, None
        for date, name in sorted(held, key=lambda key: key[0] != batch_date):  # stable: write order kept
            data = held[(date, name)]
            self._write_work(date, name, data() if callable(data) else data)

    def write_work(self, batch_date: str, name: str, data: Work) -> None:
        """Write one work file: bytes, or a function making them (called at once unless held)."""
        if self._held is not None:
            self._held[(batch_date, name)] = data
        else:
            self._write_work(batch_date, name, data() if callable(data) else data)

    def _write_work(self, batch_date: str, name: str, data: bytes) -> None:
        self.write(self.work(batch_date) / name, data)

    def read_work(self, batch_date: str, name: str) -> bytes | None:
        if self._held is not None:
            data = self._held.get((batch_date, name))
            if callable(data):
                data = self._held[(batch_date, name)] = data()
            return data
        path = self.work(batch_date) / name
        return path.read_bytes() if path.is_file() else None

    def clear_work(self, batch_date: str) -> None:
        if self._held is not None:
            self._held = {key: data for key, data in self._held.items() if key[0] != batch_date}
        work = self.work(batch_date)
        if work.exists():
            work.rmdir(recursive=True) if not isinstance(work, Path) else shutil.rmtree(work)

    # ---- outputs ----
    def write(self, target, data: bytes) -> None:
        """Write one file or object whole."""
        raise NotImplementedError

    def check_locations(self) -> None:
        """Refuse locations that cannot work (before any work)."""

    def night(self, batch_date: str):
        """The exclusive section in which a night is read back and published."""
        return contextlib.nullcontext()

    def publish(self, batch_date: str, files: Mapping[str, bytes]):
        raise NotImplementedError

    def history(self, batch_date: str, window: int):
        return read_history(self.out, batch_date, window)

    def published_decision(self, batch_date: str) -> dict | None:
        from truthsieve.pipeline.revisions import read_published_decision

        return read_published_decision(self.out, batch_date)

    def recent(self, batch_date: str) -> list[dict]:
        from truthsieve.pipeline.report_history import recent_nights

        return recent_nights(self.out, batch_date)

    def in_force_before(self, batch_date: str) -> dict | None:
        """The rule in force before this night; None where no ledger is kept."""
        return None

    def record_publication(self, batch_date: str, decision_bytes: bytes) -> None:
        """Record the publication in the ledger, where one is kept."""

    def write_index(self):
        return write_index(self.out)

    def record_alerts_sent(self, batch_date: str, data: bytes) -> None:
        """Write ``alerts_sent.json`` of a published night (carried across republishes)."""
        self.write(batch_location(self.out, batch_date) / "alerts_sent.json", data)
        mirror = batch_dir(self.out, batch_date) / "alerts_sent.json"
        if mirror != batch_location(self.out, batch_date) / "alerts_sent.json":
            self.write(mirror, data)  # an object store's contract-path mirror


class LocalStore(BatchStore):
    """A local output root: per-date lock, revision folder + symlink publish, the ledger.

    :param lock_timeout: seconds to wait for another run of the same date.
    """

    def __init__(self, inbox, out, run: str | None = None, lock_timeout: float = 600.0) -> None:
        super().__init__(inbox, out, run)
        self.lock_timeout = lock_timeout

    def source_folders(self, batch_date: str) -> list[str]:
        # links leaving the inbox included: validation records their refusal
        return [p.name for p in layout.scan_batch(self.inbox, batch_date).sources]

    def write(self, target, data: bytes) -> None:
        from truthsieve.pipeline.outputs import write_atomic

        target.parent.mkdir(parents=True, exist_ok=True)
        write_atomic(target, data, step="work_temporary_written")  # not a publishing step

    def _write_work(self, batch_date: str, name: str, data: bytes) -> None:
        from truthsieve.pipeline.outputs import write_atomic

        # A private work area (one command-line screen) is removed when the run ends and
        # discarded when its process dies, so its files need no fsync; a shared one (the
        # DAG's tasks, on storage every worker sees) keeps it.
        target = self.work(batch_date) / name
        target.parent.mkdir(parents=True, exist_ok=True)
        write_atomic(target, data, step="work_temporary_written", durable=self.run is None)

    def check_locations(self) -> None:
        if isinstance(self.inbox, Path):
            from truthsieve.pipeline.locations import check_out_location

            check_out_location(self.inbox, self.out)

    @contextlib.contextmanager
    def night(self, batch_date: str):
        from truthsieve.pipeline.outputs import date_lock, recover

        self.out.mkdir(parents=True, exist_ok=True)
        with date_lock(self.out, batch_date, self.lock_timeout):
            recover(self.out, batch_date)
            self._remove_dead_work(batch_date)
            yield

    def _remove_dead_work(self, batch_date: str) -> None:
        """Private work areas (``<batch>.<pid>.<token>``) of screens whose process is gone."""
        for folder in (self.out / layout.WORK).glob(f"{layout.batch_name(batch_date)}.*"):
            pid = folder.name.removeprefix(f"{layout.batch_name(batch_date)}.").split(".")[0]
            if pid.isdigit() and not _alive(int(pid)):
                shutil.rmtree(folder, ignore_errors=True)

    def publish(self, batch_date: str, files: Mapping[str, bytes]) -> Path:
        from truthsieve.pipeline.outputs import publish

        return publish(self.out, batch_date, files)

    def record_alerts_sent(self, batch_date: str, data: bytes) -> None:
        from truthsieve.pipeline.outputs import date_lock, write_atomic

        with date_lock(self.out, batch_date, self.lock_timeout):
            write_atomic(batch_dir(self.out, batch_date) / "alerts_sent.json", data)

    def in_force_before(self, batch_date: str) -> dict | None:
        from truthsieve.pipeline.verdicts import in_force_before

        return in_force_before(self.out, batch_date)

    def record_publication(self, batch_date: str, decision_bytes: bytes) -> None:
        from truthsieve.pipeline.verdicts import record_publication

        record_publication(self.out, batch_date, decision_bytes, self.lock_timeout)


def private_run() -> str:
    """A private work area name for one command-line screen: ``<pid>.<token>``."""
    import os
    import uuid

    return f"{os.getpid()}.{uuid.uuid4().hex[:12]}"


def _alive(pid: int) -> bool:
    import os

    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def write_index(out):
    """Render ``index.html`` from every night's decision (``out`` may be object storage)."""
    from truthsieve.pipeline.decision import decision_from_json
    from truthsieve.pipeline.outputs import write_index_page
    from truthsieve.pipeline.report import render_index

    out = as_location(out)
    decisions, unreadable = [], {}
    for date in published_dates(out):
        try:  # one night's broken or foreign file must not stop the index of the others
            decision = decision_from_json(json.loads((batch_location(out, date) / "decision.json").read_text()))
            if decision.batch_date != date:
                raise ValueError(f"it is the decision of {decision.batch_date!r}")
            render_index([decision])  # a value of the wrong type fails here, not in the whole page
            decisions.append(decision)
        except (OSError, ValueError, KeyError, TypeError, AttributeError) as error:
            unreadable[date] = f"{type(error).__name__}: {error}"
    entries = []
    if isinstance(out, Path):
        from truthsieve.pipeline.ledger import read_ledger

        entries = read_ledger(out)
    page = render_index(decisions, entries, unreadable).encode()
    if isinstance(out, Path):
        return write_index_page(out, page)
    path = out / "index.html"
    path.write_bytes(page)  # one object PUT is atomic on object stores
    return path
