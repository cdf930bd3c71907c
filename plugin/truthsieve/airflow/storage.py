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


def store_for(inbox: str, out: str, *, run: str | None = None, lock_timeout: float = 600.0):
    """The :class:`~truthsieve.pipeline.store.BatchStore` of an inbox and an output location:
    a :class:`~truthsieve.pipeline.store.LocalStore` for a local output root, else an
    :class:`ObjectStore`. Relative ``file://``/``local://`` URIs are refused.

    :param run: a private work area name (the command line's); None: the night's shared one.
    :param lock_timeout: a local output root's wait for another run of the same date.
    """
    from truthsieve.pipeline.store import LocalStore

    source = local_path(inbox) if is_local(inbox) else location(inbox)
    if is_local(out):
        return LocalStore(source, local_path(out), run=run, lock_timeout=lock_timeout)
    return _object_store_class()(source, location(out), run=run)


def command_line_store(inbox: Path, out: str, lock_timeout: float):
    """The store of one command-line run whose ``--out`` is a URL (:func:`store_for`, the
    DAG's, with a private work area), its locations checked before any work.

    :raises ConfigError: one line: an unsupported scheme or a missing file-system package,
        a relative ``file://`` URI, an output inside the inbox, an object where a folder
        should be, or a location that cannot be reached or written.
    """
    from truthsieve.pipeline.store import private_run

    try:
        is_local(out)
    except (ValueError, ImportError) as error:  # fsspec: "Unsupported filesystem: 'x'", "Install s3fs ..."
        raise ConfigError(f"--out {out}: {_one_line(error)}") from None
    try:
        store = store_for(str(inbox), out, run=private_run(), lock_timeout=lock_timeout)
    except ConfigError as error:  # a relative file:// URI
        raise ConfigError(f"--out {error}") from None
    store.check_locations()
    return store


def _one_line(error: BaseException) -> str:
    return " ".join(str(error).split()) or type(error).__name__


def check_object_out(root: ObjectStoragePath) -> None:
    """Refuse an object-store output root that is an object, or that cannot be reached or
    written: one small probe object is written and deleted (before any work)."""
    try:
        if root.is_file():
            raise ConfigError(f"--out {root} is an object, not a folder (prefix)")
        probe = root / f".truthsieve-probe-{uuid.uuid4().hex}"
        write_object(probe, b"")
        probe.unlink()
    except ConfigError:
        raise
    except Exception as error:  # noqa: BLE001 - credentials, network, permissions: each one line
        raise ConfigError(f"--out {root} cannot be reached or written: {type(error).__name__}: {_one_line(error)}") from None


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

        def check_locations(self) -> None:
            check_object_out(self.out)

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
