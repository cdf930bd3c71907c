"""Where a night's files live: a local folder, or object storage through ObjectStoragePath.

Locations are plain paths, ``file://`` URIs or any URI Airflow's ``ObjectStoragePath``
understands (``s3://``, ``gs://``, ``memory://`` …, with credentials from an Airflow
connection, never from the configuration). Validation and analysis run on a local copy
of the night's inbox folder; results are written back object by object. On object
storage ``decision.json`` is written last: readers that wait for it never see a night
half-published. Local outputs keep the pipeline's lock and atomic folder swap.
"""

from __future__ import annotations

import contextlib
import shutil
import tempfile
from collections.abc import Iterator, Mapping
from pathlib import Path

from airflow.sdk import ObjectStoragePath

LOCAL_PROTOCOLS = ("", "file", "local")


def location(uri: str) -> ObjectStoragePath:
    return ObjectStoragePath(uri)


def is_local(uri: str) -> bool:
    return location(uri).protocol in LOCAL_PROTOCOLS


def local_path(uri: str) -> Path:
    """The local path of a local location."""
    return Path(uri.removeprefix("file://"))


def work_location(out: str, batch_date: str) -> ObjectStoragePath:
    """Intermediate files of one night, shared by every task (and every worker)."""
    return location(out) / ".work" / f"batch_date={batch_date}"


def write_object(target: ObjectStoragePath, data: bytes) -> None:
    target.parent.mkdir(parents=True, exist_ok=True)
    target.write_bytes(data)


@contextlib.contextmanager
def local_inbox(inbox: str, batch_date: str, folders: tuple[str, ...] = ()) -> Iterator[Path]:
    """A local inbox root holding the night's items table and the named source folders
    (all of them when none are named). Local inboxes are used in place, never copied."""
    if is_local(inbox):
        yield local_path(inbox)
        return
    batch = location(inbox) / f"batch_date={batch_date}"
    with tempfile.TemporaryDirectory(prefix="truthsieve-inbox-") as scratch:
        root = Path(scratch)
        for remote in batch.rglob("*"):
            relative = remote.relative_to(batch)
            parts = Path(str(relative)).parts
            if not remote.is_file() or (folders and parts[0] != "items.parquet" and parts[0] not in folders):
                continue
            target = root / f"batch_date={batch_date}" / Path(str(relative))
            target.parent.mkdir(parents=True, exist_ok=True)
            with remote.open("rb") as source, open(target, "wb") as sink:
                shutil.copyfileobj(source, sink)
        yield root


def source_folders(inbox: str, batch_date: str) -> list[str]:
    batch = location(inbox) / f"batch_date={batch_date}"
    return sorted(p.name for p in batch.iterdir() if p.name.startswith("source_id=") and p.is_dir())


def batch_exists(inbox: str, batch_date: str) -> bool:
    return (location(inbox) / f"batch_date={batch_date}").is_dir()


def publish_objects(out: str, batch_date: str, files: Mapping[str, bytes]) -> ObjectStoragePath:
    """Write a night's outputs to object storage, ``decision.json`` last, and remove
    objects of an earlier run that this one did not write (e.g. a stale aggregate)."""
    folder = location(out) / f"batch_date={batch_date}"
    stale = {str(p.relative_to(folder)) for p in folder.rglob("*") if p.is_file()} if folder.exists() else set()
    for relative in sorted(set(files) - {"decision.json"}):
        write_object(folder / relative, files[relative])
    for relative in sorted(stale - set(files)):
        (folder / relative).unlink()
    write_object(folder / "decision.json", files["decision.json"])
    return folder
