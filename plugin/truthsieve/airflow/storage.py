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

import functools
import json
import uuid
from collections.abc import Mapping
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


def store_for(inbox: str, out: str):
    """The :class:`~truthsieve.pipeline.store.BatchStore` of an inbox and an output location:
    a :class:`~truthsieve.pipeline.store.LocalStore` for a local output root, else an
    :class:`ObjectStore`. Relative ``file://``/``local://`` URIs are refused."""
    from truthsieve.pipeline.store import LocalStore

    source = local_path(inbox) if is_local(inbox) else location(inbox)
    if is_local(out):
        return LocalStore(source, local_path(out))
    return _object_store_class()(source, location(out))


@functools.cache
def _object_store_class():
    from truthsieve.pipeline.store import BatchStore

    class ObjectStore(BatchStore):
        """Outputs on an object store: revision prefix + pointer (:func:`publish_objects`).
        Object stores have no cross-process lock: the DAG's one active run is the writer,
        and no ledger is kept there."""

        def write(self, target, data: bytes) -> None:
            write_object(target, data)

        def publish(self, batch_date: str, files: Mapping[str, bytes]):
            return publish_objects(self.out, batch_date, files)

    return ObjectStore


def __getattr__(name: str):
    if name == "ObjectStore":  # built lazily: the pipeline is not imported at DAG-parse time
        return _object_store_class()
    raise AttributeError(name)


def _files_under(folder: ObjectStoragePath) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*") if p.is_file()} if folder.exists() else set()


def publish_objects(out: str, batch_date: str, files: Mapping[str, bytes]) -> ObjectStoragePath:
    """Publish a night's outputs on object storage: revision, pointer, then the mirror."""
    from truthsieve.pipeline.layout import POINTER, REVISIONS, batch_dir, batch_name
    from truthsieve.pipeline.outputs import CARRIED_FORWARD, batch_location, crash_point

    root = location(out) if isinstance(out, str) else out
    folder = batch_dir(root, batch_date)
    files = dict(files)
    current = batch_location(root, batch_date)
    for name in CARRIED_FORWARD:
        if name not in files and (current / name).is_file():
            files[name] = (current / name).read_bytes()
    token = uuid.uuid4().hex
    revisions = root / REVISIONS / batch_name(batch_date)
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
