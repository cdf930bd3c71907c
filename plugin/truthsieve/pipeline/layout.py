"""Which entries of one night's batch folder are part of the layout, and reading them safely.

The layout (the contract) is ``items.parquet`` and ``source_id=<id>/`` folders holding
``*.parquet`` label files. Every other entry becomes a :class:`Note` in the decision
(code, path, message), so nothing delivered is ignored without a word. Some of them
are errors too, because labels were probably meant to be read (see ``ingest``):

============================  =====================================================  ======
code                          entry                                                  error?
============================  =====================================================  ======
``stray_file``                a file that is not part of the layout                  no
``stray_folder``              a folder that is not part of the layout                no
``stray_parquet``             a Parquet file at batch level other than the items     no
``misnamed_items_file``       ``Items.parquet``, ``items.PARQUET``, ...              no [1]_
``misnamed_source_folder``    ``Source_id=x/``, ``SOURCE_ID=x/``, ...                no [2]_
``source_not_a_folder``       a plain file named ``source_id=x``                     no [2]_
``misnamed_label_file``       in a source folder: ``*.PARQUET``, ``*.csv``, ...      yes
``undecodable_name``          a name that is not valid UTF-8                         yes in a source folder
``link_outside_inbox``        a link whose target lies outside the inbox             yes
============================  =====================================================  ======

.. [1] ``items.parquet`` is then missing, which is an error of its own.
.. [2] the source, if registered, is listed under ``absent`` with ``why: no_folder``.

Every path is checked after resolving links: an entry whose real path leaves the inbox
is never opened, read or copied.
"""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass, field
from pathlib import Path

from truthsieve.exceptions import InputError

ITEMS_FILE = "items.parquet"
SOURCE_PREFIX = "source_id="
BATCH_PREFIX = "batch_date="
#: A source id (the contract): checked by the configuration and by ingest.
SOURCE_ID_PATTERN = "[A-Za-z0-9][A-Za-z0-9_.-]{0,63}"
# Hidden folders of an output root: revisions, publish staging, locks, the work area.
REVISIONS, STAGING, LOCKS, WORK = ".revisions", ".staging", ".locks", ".work"
POINTER = "_current.json"  # an object store's pointer to a night's current revision
LABEL_SUFFIX = ".parquet"
# Suffixes of files that plausibly hold labels in another spelling or format.
DATA_SUFFIXES = frozenset({".parquet", ".parq", ".pq", ".csv", ".tsv", ".json", ".jsonl", ".arrow", ".feather", ".xlsx", ".xls"})

NOTE_CODES = {
    "stray_file": "a file that is not part of the layout was not read",
    "stray_folder": "a folder that is not part of the layout was not read",
    "stray_parquet": "a Parquet file at batch level was not read; label files go inside source_id=<id>/",
    "misnamed_items_file": "a file named like the items table in another spelling was not read; the name is items.parquet",
    "misnamed_source_folder": "a folder named like a source folder in another spelling was not read; the prefix is source_id=",
    "source_not_a_folder": "a plain file named like a source folder was not read; sources are folders",
    "misnamed_label_file": "a file in a source folder that looks like labels but is not named *.parquet; the source is quarantined",
    "undecodable_name": "a name that is not valid UTF-8 was not read",
    "link_outside_inbox": "a link leaving the inbox was not followed",
}


@dataclass(frozen=True)
class Note:
    code: str
    path: str
    message: str

    def as_dict(self) -> dict:
        return {"code": self.code, "path": self.path, "message": self.message}  # asdict, without its deep copy


def batch_name(batch_date: str) -> str:
    """The folder name of one night, in the inbox and in the output root alike."""
    return f"{BATCH_PREFIX}{batch_date}"


def batch_dir(root, batch_date: str):
    """``root/batch_date=D`` for any path object (local, or object storage)."""
    return root / batch_name(batch_date)


def batch_date_of(name: str) -> str:
    return name.removeprefix(BATCH_PREFIX)


def source_name(source_id: str) -> str:
    return f"{SOURCE_PREFIX}{source_id}"


def work_dir(root, batch_date: str, run: str | None = None):
    """The work area of one night (``run``: a private area for one command-line screen)."""
    return root / WORK / (batch_name(batch_date) if run is None else f"{batch_name(batch_date)}.{run}")


def display(name: str) -> str:
    """A printable, JSON-safe form of a file name: undecodable bytes as ``\\xNN``."""
    return name.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")


def decodable(name: str) -> bool:
    try:
        name.encode("utf-8")
    except UnicodeEncodeError:
        return False
    return True


def inside(path: Path, root: Path) -> bool:
    """True when ``path``'s real location (every link resolved) lies inside ``root``'s."""
    try:
        return within(os.path.realpath(path), os.path.realpath(root))
    except (OSError, ValueError):
        return False


def within(real: str, real_root: str) -> bool:
    """True when the resolved path ``real`` is ``real_root`` or lies under it (both from
    ``os.path.realpath``: absolute, normalised, no link left), component by component."""
    return real == real_root or real.startswith(real_root if real_root.endswith(os.sep) else real_root + os.sep)


def real_child(path: Path, real_parent: str) -> str:
    """The real path of ``path`` given its parent's real path: that parent joined with the
    name when ``path`` is no link (one ``lstat``), else every link resolved."""
    name = path.name
    if name in ("", ".", "..") or os.path.islink(path):
        return os.path.realpath(path)
    return os.path.join(real_parent, name)


class LeavesInbox(PermissionError):
    """A file whose real location lies outside the inbox: refused, never read."""


def read_real(real: str, real_inbox: str) -> bytes:
    """The bytes at a resolved path inside the inbox, never through a link: a last component
    that became a link since it was resolved is not followed, and the file actually opened
    must lie inside ``real_inbox`` (a folder above it swapped for a link leaving the inbox
    after the scan is caught here, with no window between the check and the read).

    :raises LeavesInbox: the opened file lies outside the inbox (it is not read).
    """
    fd = os.open(real, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_CLOEXEC", 0))
    with open(fd, "rb", closefd=True) as stream:
        if not within(opened_location(fd, real), real_inbox):
            raise LeavesInbox(f"{real} lies outside the inbox")
        return stream.read()


def opened_location(fd: int, path: str) -> str:
    """Where the open file ``fd`` lies: its ``/proc/self/fd`` link on Linux (the kernel's
    own record of the opened file), else ``path`` resolved again."""
    try:
        return os.readlink(f"/proc/self/fd/{fd}")
    except OSError:
        return os.path.realpath(path)


def relative(path: Path, inbox: Path) -> str:
    """``path`` relative to the inbox, POSIX separators, printable (:func:`display`)."""
    text, root = str(path), str(inbox)
    if os.sep == "/" and root not in ("", ".") and text.startswith(root.rstrip("/") + "/"):
        return display(text[len(root.rstrip("/")) + 1:])  # what relative_to gives, without parsing the parts
    return display(path.relative_to(inbox).as_posix())


def read_inside(path: Path, inbox: Path) -> bytes:
    """The bytes of ``path`` read through its resolved location, only if that is inside the inbox.

    :raises LeavesInbox: the resolved path leaves the inbox (nothing is opened).
    """
    real, real_inbox = os.path.realpath(path), os.path.realpath(inbox)
    if not within(real, real_inbox):
        raise LeavesInbox(f"{relative(path, inbox)} leaves the inbox")
    return read_real(real, real_inbox)


def sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


@dataclass(frozen=True)
class BatchLayout:
    """The entries of a batch folder: the items file entry, source folders and notes."""

    items: Path | None
    sources: list[Path]
    notes: list[Note]


def _note(code: str, path: Path, inbox: Path) -> Note:
    return Note(code, relative(path, inbox), NOTE_CODES[code])


def scan_batch(inbox: str | Path, batch_date: str) -> BatchLayout:
    """Sort the batch folder's entries into the layout and notes (nothing is read).

    :raises InputError: the batch folder is missing or is a link leaving the inbox.
    """
    inbox = Path(inbox)
    folder = batch_dir(inbox, batch_date)
    if not folder.is_dir():
        raise InputError(f"{folder}: no such batch folder")
    if not inside(folder, inbox):
        raise InputError(f"{folder}: the batch folder is a link leaving the inbox; refused")
    items, sources, notes = None, [], []
    for entry in sorted(os.scandir(folder), key=lambda e: e.name):
        path, name = Path(entry.path), entry.name
        lower = name.lower()
        if not decodable(name):
            notes.append(_note("undecodable_name", path, inbox))
        elif entry.is_symlink() and not inside(path, inbox):
            if name != ITEMS_FILE and not name.startswith(SOURCE_PREFIX):
                notes.append(_note("link_outside_inbox", path, inbox))
            elif name == ITEMS_FILE:
                items = path  # validate_items records the refusal
            else:
                sources.append(path)  # validate_source records the refusal
        elif name == ITEMS_FILE:
            items = path
        elif name.startswith(SOURCE_PREFIX):
            if entry.is_dir():
                sources.append(path)
            else:
                notes.append(_note("source_not_a_folder", path, inbox))
        elif lower.startswith(SOURCE_PREFIX):
            notes.append(_note("misnamed_source_folder", path, inbox))
        elif lower == ITEMS_FILE:
            notes.append(_note("misnamed_items_file", path, inbox))
        elif entry.is_dir():
            notes.append(_note("stray_folder", path, inbox))
        elif lower.endswith(LABEL_SUFFIX):
            notes.append(_note("stray_parquet", path, inbox))
        else:
            notes.append(_note("stray_file", path, inbox))
    return BatchLayout(items, sources, notes)


@dataclass(frozen=True)
class SourceEntries:
    """The entries of one source folder: label files, refused entries and notes."""

    label_files: list[Path]
    refused: list[tuple[Path, str]]  # (entry, code): entries that make the source invalid
    notes: list[Note]
    #: each label file's real path (inside the inbox), read with :func:`read_real`
    real_files: list[str] = field(default_factory=list, compare=False)


def scan_source(inbox: Path, folder: Path, real_folder: str | None = None, real_inbox: str | None = None) -> SourceEntries:
    """Sort one source folder's entries (the folder itself is known to be inside the inbox).

    :param real_folder, real_inbox: the folder's and the inbox's real paths when the
        caller has them (resolved here otherwise): a label file that is no link is then
        placed without resolving its path again; a link is resolved whole.
    """
    real_folder = os.path.realpath(folder) if real_folder is None else real_folder
    real_inbox = os.path.realpath(inbox) if real_inbox is None else real_inbox
    files, reals, refused, notes = [], [], [], []
    for entry in sorted(os.scandir(folder), key=lambda e: e.name):
        path, name = Path(entry.path), entry.name
        suffix = os.path.splitext(name)[1]
        link = entry.is_symlink()
        real = os.path.realpath(entry.path) if link else os.path.join(real_folder, name)
        if not decodable(name):
            refused.append((path, "undecodable_name"))
        elif link and not within(real, real_inbox):
            refused.append((path, "link_outside_inbox"))
        elif entry.is_dir():
            notes.append(_note("stray_folder", path, inbox))
            continue
        elif suffix == LABEL_SUFFIX:
            files.append(path)
            reals.append(real)
            continue
        elif suffix.lower() in DATA_SUFFIXES:
            refused.append((path, "misnamed_label_file"))
        else:
            notes.append(_note("stray_file", path, inbox))
            continue
        notes.append(_note(refused[-1][1], path, inbox))
    return SourceEntries(files, refused, notes, reals)
