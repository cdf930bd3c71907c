"""Where a night's files live: a local folder, or object storage through ObjectStoragePath.

Locations are absolute paths, ``file:///…`` or ``local:///…`` URIs, or any URI Airflow's
``ObjectStoragePath`` understands (``s3://``, ``gs://``, ``memory://`` …, with credentials
from an Airflow connection, never from the configuration). Validation and analysis run on
a local copy of the night's inbox folder. Local outputs use the pipeline's lock and
one-step symlink swap (:mod:`truthsieve.pipeline.outputs`).

On object storage a night is written under a fresh revision prefix
``<out>/.revisions/batch_date=D/<token>/`` and made current by one small pointer object,
``<out>/batch_date=D/_current.json``, written last; truthsieve's readers (drift history,
index) follow the pointer, so a crash at any moment leaves the previous night or the new
one, never a mix. The contract paths ``<out>/batch_date=D/<file>`` are then mirrored from
the revision with ``decision.json`` deleted first and written last: a reader that waits
for ``decision.json`` sees a whole mirror or none.
"""

from __future__ import annotations

import contextlib
import json
import shutil
import tempfile
import uuid
from collections.abc import Iterator, Mapping
from pathlib import Path

from airflow.sdk import ObjectStoragePath

from truthsieve.exceptions import ConfigError

LOCAL_PROTOCOLS = ("", "file", "local")

#: Crash points of :func:`publish_objects`, in the order they are reached (test-only hooks).
OBJECT_PUBLISH_STEPS = (
    "object_revision_started",
    "object_revision_written",
    "object_pointer_switched",
    "object_mirror_started",
    "object_mirror_file_written",
    "object_mirrored",
)


def location(uri: str) -> ObjectStoragePath:
    return ObjectStoragePath(uri)


def is_local(uri: str) -> bool:
    return location(uri).protocol in LOCAL_PROTOCOLS


def local_path(uri: str) -> Path:
    """The local path of a local location; relative ``file://``/``local://`` URIs are refused
    (they would resolve under whatever folder the worker happens to run in)."""
    text = str(uri)
    for scheme in ("file://", "local://"):
        if text.startswith(scheme):
            text = text.removeprefix(scheme)
            if not text.startswith("/"):
                raise ConfigError(f"{uri}: a {scheme} location must be absolute ({scheme}/path/to/folder)")
    return Path(text)


def work_location(out: str, batch_date: str) -> ObjectStoragePath:
    """Intermediate files of one night, shared by every task (and every worker)."""
    return location(out) / ".work" / f"batch_date={batch_date}"


def write_object(target: ObjectStoragePath, data: bytes) -> None:
    """Write one file or object whole: locally through a temporary name and a rename,
    on object stores as one PUT (which is atomic there)."""
    if target.protocol in LOCAL_PROTOCOLS:
        from truthsieve.pipeline.outputs import write_atomic

        path = Path(target.path)
        path.parent.mkdir(parents=True, exist_ok=True)
        write_atomic(path, data)
        return
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


def _files_under(folder: ObjectStoragePath) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*") if p.is_file()} if folder.exists() else set()


def publish_objects(out: str, batch_date: str, files: Mapping[str, bytes]) -> ObjectStoragePath:
    """Publish a night's outputs on object storage: revision, pointer, then the mirror."""
    from truthsieve.pipeline.outputs import CARRIED_FORWARD, POINTER, REVISIONS, batch_location, crash_point

    root = location(out)
    folder = root / f"batch_date={batch_date}"
    files = dict(files)
    current = batch_location(root, batch_date)
    for name in CARRIED_FORWARD:
        if name not in files and (current / name).is_file():
            files[name] = (current / name).read_bytes()
    token = uuid.uuid4().hex
    revisions = root / REVISIONS / f"batch_date={batch_date}"
    for k, relative in enumerate(sorted(files)):
        write_object(revisions / token / relative, files[relative])
        if k == 0:
            crash_point("object_revision_started")
    crash_point("object_revision_written")
    write_object(folder / POINTER, json.dumps({"revision": token, "files": sorted(files)}, sort_keys=True).encode())
    crash_point("object_pointer_switched")
    mirror(folder, files)
    crash_point("object_mirrored")
    for old in revisions.iterdir() if revisions.exists() else ():
        if old.name != token:
            old.rmdir(recursive=True)
    return folder


def mirror(folder: ObjectStoragePath, files: Mapping[str, bytes]) -> None:
    """Copy a revision's files to the contract paths; ``decision.json`` exists there only
    while the mirror is whole."""
    from truthsieve.pipeline.outputs import POINTER, crash_point

    decision = folder / "decision.json"
    if decision.exists():
        decision.unlink()
    crash_point("object_mirror_started")
    for relative in sorted(set(files) - {"decision.json"}):
        write_object(folder / relative, files[relative])
        crash_point("object_mirror_file_written")
    for relative in sorted(_files_under(folder) - set(files) - {POINTER}):
        (folder / relative).unlink()
    write_object(decision, files["decision.json"])
