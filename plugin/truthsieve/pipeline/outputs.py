"""Writing a batch's outputs: atomically, under a per-date lock, never half-visible.

Everything of one batch date is written into a staging folder next to the output
(same file system), then swapped in with two renames under an exclusive lock on the
date. A run that dies while staging leaves the previous outputs untouched; a run that
dies between the two renames leaves the previous outputs in ``.staging/``, and the
next run of that date puts them back before it starts.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import shutil
import time
import uuid
from collections.abc import Iterator, Mapping
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from truthsieve.core.source_checks import SourceHistory
from truthsieve.exceptions import BatchLockedError

STAGING = ".staging"
LOCKS = ".locks"


def batch_output(out: str | Path, batch_date: str) -> Path:
    return Path(out) / f"batch_date={batch_date}"


def dumps_decision(decision: Mapping) -> bytes:
    """Canonical JSON: sorted keys, fixed separators, no NaN: reruns are byte-identical."""
    return (json.dumps(decision, sort_keys=True, indent=2, allow_nan=False, ensure_ascii=False) + "\n").encode()


def write_atomic(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` through a temporary name in the same folder."""
    temporary = path.with_name(f".{path.name}.{uuid.uuid4().hex}.tmp")
    with open(temporary, "wb") as handle:
        handle.write(data)
        handle.flush()
        os.fsync(handle.fileno())
    os.replace(temporary, path)


def parquet_bytes(table: pa.Table) -> bytes:
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink)
    return sink.getvalue().to_pybytes()


@contextlib.contextmanager
def date_lock(out: str | Path, batch_date: str, timeout: float = 600.0) -> Iterator[None]:
    """Exclusive lock of one batch date across processes on this file system."""
    folder = Path(out) / LOCKS
    folder.mkdir(parents=True, exist_ok=True)
    with open(folder / f"batch_date={batch_date}.lock", "a+") as handle:
        deadline = time.monotonic() + timeout
        while True:
            try:
                fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                if time.monotonic() > deadline:
                    raise BatchLockedError(f"batch {batch_date} is locked by another run") from None
                time.sleep(0.05)
        try:
            yield
        finally:
            fcntl.flock(handle.fileno(), fcntl.LOCK_UN)


def recover(out: str | Path, batch_date: str) -> None:
    """Under the date lock: restore outputs a dead run left mid-swap; clear its staging."""
    final = batch_output(out, batch_date)
    staging = Path(out) / STAGING
    if not staging.is_dir():
        return
    leftovers = sorted(staging.glob(f"batch_date={batch_date}.*"))
    previous = [p for p in leftovers if p.name.endswith(".previous")]
    if not final.exists() and previous:
        os.rename(previous[-1], final)
    for path in staging.glob(f"batch_date={batch_date}.*"):
        shutil.rmtree(path, ignore_errors=True)


def publish(out: str | Path, batch_date: str, files: Mapping[str, bytes]) -> Path:
    """Swap in a batch folder holding exactly ``files`` (relative path -> content).

    Call under :func:`date_lock`.
    """
    out = Path(out)
    token = uuid.uuid4().hex
    staging = out / STAGING / f"batch_date={batch_date}.{token}"
    staging.mkdir(parents=True)
    for relative, data in sorted(files.items()):
        target = staging / relative
        target.parent.mkdir(parents=True, exist_ok=True)
        write_atomic(target, data)
    final = batch_output(out, batch_date)
    previous = out / STAGING / f"batch_date={batch_date}.{token}.previous"
    if final.exists():
        os.rename(final, previous)
    os.rename(staging, final)
    shutil.rmtree(previous, ignore_errors=True)
    _fsync_folder(out)
    return final


def _fsync_folder(folder: Path) -> None:
    descriptor = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)


def as_location(location):
    """A path object for ``location``: strings become local paths; path objects (local, or
    object storage such as Airflow's ``ObjectStoragePath``) are used as they are."""
    return Path(location) if isinstance(location, str) else location


def read_history(out, batch_date: str, window: int) -> dict[str, SourceHistory]:
    """Pooled per-source counts of the ``window`` latest batches before ``batch_date``."""
    out = as_location(out)
    dates = sorted(
        p.name.removeprefix("batch_date=")
        for p in out.glob("batch_date=*")
        if p.name.removeprefix("batch_date=") < batch_date and (p / "sources.parquet").is_file()
    )[-window:]
    totals: dict[str, list[int]] = {}
    for date in dates:
        data = (out / f"batch_date={date}" / "sources.parquet").read_bytes()
        table = pq.read_table(pa.BufferReader(data), columns=["source_id", "items", "positives", "disagreements"])
        for row in table.to_pylist():
            entry = totals.setdefault(row["source_id"], [0, 0, 0, 0])
            entry[0] += 1
            entry[1] += row["items"]
            entry[2] += row["positives"]
            entry[3] += row["disagreements"]
    return {source: SourceHistory(*counts) for source, counts in totals.items()}
