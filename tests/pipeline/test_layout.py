"""``pipeline/layout.py`` on its own: the contract's names, the inbox scan's notes, and the
refusal of links that leave the inbox (real folders, files and symlinks under ``tmp_path``)."""

from __future__ import annotations

import os
import re

import pytest

from truthsieve.exceptions import InputError
from truthsieve.pipeline import layout
from truthsieve.pipeline.layout import NOTE_CODES, Note, inside, read_inside, scan_batch, scan_source

DATE = "2026-11-03"
BATCH = f"batch_date={DATE}"
UNDECODABLE = os.fsdecode(b"\xffbad")  # a name that is not UTF-8: held as a surrogate escape


def note(code: str, path: str) -> Note:
    return Note(code, path, NOTE_CODES[code])


# --- the contract's names --------------------------------------------------------------


def test_the_names_are_the_contracts():
    # CONTRACT.md, "On disk": <inbox>/batch_date=YYYY-MM-DD/items.parquet and source_id=<id>/<any>.parquet
    assert (layout.ITEMS_FILE, layout.SOURCE_PREFIX, layout.BATCH_PREFIX, layout.LABEL_SUFFIX) == ("items.parquet", "source_id=", "batch_date=", ".parquet")
    assert layout.batch_name(DATE) == "batch_date=2026-11-03"
    assert layout.batch_date_of(layout.batch_name(DATE)) == DATE


@pytest.mark.parametrize(
    ("source_id", "valid"),
    [
        ("farm-a", True),
        ("A", True),  # one character: the first class alone
        ("9.lab_2-x", True),
        ("a" * 64, True),  # 1 + 63 characters: the longest
        ("a" * 65, False),
        ("-farm", False),  # the first character is a letter or digit
        ("_farm", False),
        (".farm", False),
        ("farm a", False),
        ("farm/a", False),
        ("", False),
    ],
)
def test_the_source_id_pattern_is_the_contracts(source_id, valid):
    # CONTRACT.md: `source_id` matches [A-Za-z0-9][A-Za-z0-9_.-]{0,63}
    assert (re.fullmatch(layout.SOURCE_ID_PATTERN, source_id) is not None) is valid


def test_display_writes_undecodable_bytes_as_escapes():
    assert layout.display("source_id=a/labels.parquet") == "source_id=a/labels.parquet"
    assert layout.display(UNDECODABLE) == "\\xffbad"  # byte 0xff -> the four characters \xff
    assert layout.decodable("grädes.parquet") and not layout.decodable(UNDECODABLE)


# --- scan_batch: every entry outside the layout is a note ----------------------------------


def test_scan_batch_sorts_every_entry_into_the_layout_or_a_note(tmp_path):
    inbox, outside = tmp_path / "inbox", tmp_path / "elsewhere"
    folder = inbox / BATCH
    folder.mkdir(parents=True)
    outside.mkdir()
    (outside / "x.parquet").write_bytes(b"outside")
    (outside / "source").mkdir()
    (folder / "items.parquet").write_bytes(b"items")
    (folder / "Items.parquet").write_bytes(b"")
    (folder / "items.PARQUET").write_bytes(b"")
    (folder / "README.txt").write_text("delivered by the night shift")
    (folder / "SOURCE_ID=north").mkdir()
    (folder / "extra.parquet").write_bytes(b"")
    (folder / "Late.PARQUET").write_bytes(b"")
    (folder / "old").mkdir()
    (folder / "source_id=east").mkdir()
    (folder / "source_id=west").write_bytes(b"")
    os.symlink(outside / "x.parquet", folder / "link.parquet")
    os.symlink(outside / "source", folder / "source_id=far")
    os.symlink(folder / "items.parquet", folder / "tonight.txt")  # a link that stays inside: an ordinary entry
    (folder / UNDECODABLE).write_bytes(b"")

    found = scan_batch(inbox, DATE)

    assert found.items == folder / "items.parquet"
    # a source folder that is a link leaving the inbox is still a source: validate_source refuses it
    assert found.sources == [folder / "source_id=east", folder / "source_id=far"]
    # in name order (code points: upper case before lower case, the escaped 0xff last)
    assert found.notes == [
        note("misnamed_items_file", f"{BATCH}/Items.parquet"),
        note("stray_parquet", f"{BATCH}/Late.PARQUET"),  # Parquet in any spelling
        note("stray_file", f"{BATCH}/README.txt"),
        note("misnamed_source_folder", f"{BATCH}/SOURCE_ID=north"),
        note("stray_parquet", f"{BATCH}/extra.parquet"),
        note("misnamed_items_file", f"{BATCH}/items.PARQUET"),
        note("link_outside_inbox", f"{BATCH}/link.parquet"),
        note("stray_folder", f"{BATCH}/old"),
        note("source_not_a_folder", f"{BATCH}/source_id=west"),
        note("stray_file", f"{BATCH}/tonight.txt"),
        note("undecodable_name", f"{BATCH}/\\xffbad"),
    ]
    assert found.notes[0].as_dict() == {"code": "misnamed_items_file", "path": f"{BATCH}/Items.parquet", "message": NOTE_CODES["misnamed_items_file"]}


def test_an_items_link_leaving_the_inbox_is_kept_as_the_items_entry_for_validation_to_refuse(tmp_path):
    inbox = tmp_path / "inbox"
    (inbox / BATCH).mkdir(parents=True)
    (tmp_path / "secret.parquet").write_bytes(b"secret")
    os.symlink(tmp_path / "secret.parquet", inbox / BATCH / "items.parquet")
    found = scan_batch(inbox, DATE)
    assert found.items == inbox / BATCH / "items.parquet" and found.notes == [] and found.sources == []


def test_scan_batch_refuses_a_missing_batch_folder_and_one_that_leaves_the_inbox(tmp_path):
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    with pytest.raises(InputError, match="no such batch folder"):
        scan_batch(inbox, DATE)
    (tmp_path / "elsewhere").mkdir()
    os.symlink(tmp_path / "elsewhere", inbox / BATCH)
    with pytest.raises(InputError, match="the batch folder is a link leaving the inbox; refused"):
        scan_batch(inbox, DATE)


def test_scan_source_refuses_what_makes_the_source_invalid_and_notes_the_rest(tmp_path):
    inbox = tmp_path / "inbox"
    source = inbox / BATCH / "source_id=east"
    other = inbox / BATCH / "source_id=west"
    source.mkdir(parents=True)
    other.mkdir()
    (tmp_path / "secret.parquet").write_bytes(b"secret")
    (other / "shared.parquet").write_bytes(b"west's labels")
    (source / "a.parquet").write_bytes(b"")
    (source / "b.PARQUET").write_bytes(b"")
    (source / "c.csv").write_text("item_id,label\n")
    (source / "d.txt").write_text("notes")
    (source / "e").mkdir()
    os.symlink(tmp_path / "secret.parquet", source / "f.parquet")
    os.symlink(other / "shared.parquet", source / "g.parquet")  # inside the inbox: read like any label file
    (source / "h.parquet").mkdir()  # a folder, whatever its name
    (source / UNDECODABLE).write_bytes(b"")

    found = scan_source(inbox, source)

    assert found.label_files == [source / "a.parquet", source / "g.parquet"]
    assert found.refused == [
        (source / "b.PARQUET", "misnamed_label_file"),
        (source / "c.csv", "misnamed_label_file"),
        (source / "f.parquet", "link_outside_inbox"),
        (source / UNDECODABLE, "undecodable_name"),
    ]
    where = f"{BATCH}/source_id=east"
    assert found.notes == [
        note("misnamed_label_file", f"{where}/b.PARQUET"),
        note("misnamed_label_file", f"{where}/c.csv"),
        note("stray_file", f"{where}/d.txt"),
        note("stray_folder", f"{where}/e"),
        note("link_outside_inbox", f"{where}/f.parquet"),
        note("stray_folder", f"{where}/h.parquet"),
        note("undecodable_name", f"{where}/\\xffbad"),
    ]


# --- inside / read_inside: links are resolved before anything is opened -------------------


@pytest.fixture
def inbox_and_secret(tmp_path):
    inbox = tmp_path / "inbox"
    (inbox / BATCH / "source_id=a").mkdir(parents=True)
    secret = tmp_path / "secret.parquet"
    secret.write_bytes(b"not yours")
    return inbox, secret


def test_a_plain_file_inside_is_read(inbox_and_secret):
    inbox, _ = inbox_and_secret
    path = inbox / BATCH / "source_id=a" / "labels.parquet"
    path.write_bytes(b"labels")
    assert inside(path, inbox)
    assert read_inside(path, inbox) == b"labels"


def test_a_link_to_a_file_outside_is_refused_before_it_is_opened(inbox_and_secret):
    inbox, secret = inbox_and_secret
    link = inbox / BATCH / "source_id=a" / "labels.parquet"
    os.symlink(secret, link)
    assert not inside(link, inbox)
    with pytest.raises(PermissionError) as refused:
        read_inside(link, inbox)
    assert str(refused.value) == f"{BATCH}/source_id=a/labels.parquet leaves the inbox"


def test_a_relative_link_climbing_out_is_refused(inbox_and_secret):
    inbox, _ = inbox_and_secret
    link = inbox / BATCH / "source_id=a" / "labels.parquet"
    os.symlink("../../../secret.parquet", link)  # source_id=a -> batch -> inbox -> tmp_path
    assert link.read_bytes() == b"not yours"  # the link does reach the secret
    with pytest.raises(PermissionError, match="leaves the inbox"):
        read_inside(link, inbox)


def test_a_chain_of_links_that_ends_outside_is_refused(inbox_and_secret):
    inbox, secret = inbox_and_secret
    hop = inbox / BATCH / "hop.parquet"
    os.symlink(secret, hop)
    link = inbox / BATCH / "source_id=a" / "labels.parquet"
    os.symlink(hop, link)  # the first hop stays inside; the second leaves
    assert not inside(link, inbox) and not inside(hop, inbox)
    with pytest.raises(PermissionError):
        read_inside(link, inbox)


def test_a_file_under_a_folder_link_leaving_the_inbox_is_refused(inbox_and_secret, tmp_path):
    inbox, _ = inbox_and_secret
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    (elsewhere / "labels.parquet").write_bytes(b"not yours either")
    os.symlink(elsewhere, inbox / BATCH / "source_id=b")
    path = inbox / BATCH / "source_id=b" / "labels.parquet"  # no link in its own name
    assert not inside(path, inbox)
    with pytest.raises(PermissionError):
        read_inside(path, inbox)


def test_dot_dot_in_a_path_is_resolved_too(inbox_and_secret):
    inbox, _ = inbox_and_secret
    assert not inside(inbox / BATCH / ".." / ".." / "secret.parquet", inbox)


def test_a_sibling_folder_sharing_the_inbox_name_as_prefix_is_outside(tmp_path):
    inbox, sibling = tmp_path / "inbox", tmp_path / "inbox-old"
    inbox.mkdir()
    sibling.mkdir()
    (sibling / "items.parquet").write_bytes(b"old")
    os.symlink(sibling / "items.parquet", inbox / "items.parquet")
    # "/…/inbox-old/items.parquet" starts with the string "/…/inbox" but is not inside it
    assert not inside(inbox / "items.parquet", inbox)


def test_links_inside_the_inbox_are_followed_and_read_at_their_target(inbox_and_secret):
    inbox, _ = inbox_and_secret
    target = inbox / BATCH / "source_id=a" / "labels.parquet"
    target.write_bytes(b"labels")
    link = inbox / BATCH / "source_id=a" / "alias.parquet"
    os.symlink("labels.parquet", link)
    assert inside(link, inbox) and read_inside(link, inbox) == b"labels"


def test_an_inbox_reached_through_a_link_still_holds_its_own_files(inbox_and_secret, tmp_path):
    inbox, _ = inbox_and_secret
    alias = tmp_path / "alias"
    os.symlink(inbox, alias)  # e.g. /data/inbox -> /mnt/disk1/inbox: both sides are resolved
    path = alias / BATCH / "source_id=a" / "labels.parquet"
    path.write_bytes(b"labels")
    assert inside(path, alias) and read_inside(path, alias) == b"labels"
    assert inside(path, inbox)


def test_sha256_is_the_standard_digest():
    # Secure Hash Standard, FIPS PUB 180-2 (NIST, 2002), appendix B.1: SHA-256("abc") (digits from memory)
    assert layout.sha256(b"abc") == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
