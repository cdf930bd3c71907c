"""BatchStore: the local store (real files) and the object store on fsspec's ``memory://``."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from inboxes import write_batch, write_config
from truthsieve.exceptions import ConfigError
from truthsieve.pipeline import layout, night
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.store import LocalStore, private_run

DATE = "2026-11-03"


def test_layout_names_are_the_contract_paths(tmp_path):
    # The contract: <root>/batch_date=YYYY-MM-DD/ and source_id=<id>/ (CONTRACT.md, "On disk").
    assert layout.batch_dir(tmp_path, DATE) == tmp_path / "batch_date=2026-11-03"
    assert layout.source_name("farm-a") == "source_id=farm-a"
    assert layout.work_dir(tmp_path, DATE) == tmp_path / ".work" / "batch_date=2026-11-03"
    assert layout.work_dir(tmp_path, DATE, "7.ab") == tmp_path / ".work" / "batch_date=2026-11-03.7.ab"
    assert layout.batch_date_of("batch_date=2026-11-03") == DATE


def test_local_work_area_round_trip_and_clear(tmp_path):
    shared, private = LocalStore(tmp_path / "in", tmp_path / "out"), LocalStore(tmp_path / "in", tmp_path / "out", run="1.x")
    shared.write_work(DATE, "sources/a.json", b"shared")
    private.write_work(DATE, "sources/a.json", b"private")
    assert shared.read_work(DATE, "sources/a.json") == b"shared" and private.read_work(DATE, "sources/a.json") == b"private"
    assert shared.read_work(DATE, "missing.json") is None
    private.clear_work(DATE)
    assert private.read_work(DATE, "sources/a.json") is None
    assert shared.read_work(DATE, "sources/a.json") == b"shared"  # another run's area is untouched
    assert not list((tmp_path / "out" / ".work").rglob("*.tmp"))


def test_a_work_area_held_in_memory_touches_no_file_until_spilled(tmp_path):
    store = LocalStore(tmp_path / "in", tmp_path / "out", run="2.y")
    other = "2026-02-02"
    with store.work_in_memory():
        store.write_work(DATE, "night/fit.json", b"fit")
        store.write_work(other, "night/fit.json", b"another night")
        assert store.read_work(DATE, "night/fit.json") == b"fit"
        assert not (tmp_path / "out").exists()  # held: nothing on disk
        store.spill_work(DATE)
        on_disk = store.work(DATE) / "night" / "fit.json"
        assert on_disk.read_bytes() == b"fit"
        assert (store.work(other) / "night" / "fit.json").read_bytes() == b"another night"  # none is dropped
        store.write_work(DATE, "incentives/a.json", b"after")  # spilled: writes go to disk now
        assert (store.work(DATE) / "incentives" / "a.json").read_bytes() == b"after"
    assert store.read_work(DATE, "night/fit.json") == b"fit"  # outside the block: the files
    with store.work_in_memory():
        store.write_work(DATE, "sources/b.json", b"held")
        store.clear_work(DATE)
        assert store.read_work(DATE, "sources/b.json") is None and not store.work(DATE).exists()


def test_a_dead_screens_private_work_area_is_removed_under_the_date_lock(tmp_path):
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()  # its pid is now free (reuse within this test is all but impossible)
    store = LocalStore(tmp_path / "in", tmp_path / "out", run=private_run())
    dead = LocalStore(tmp_path / "in", tmp_path / "out", run=f"{child.pid}.dead")
    dead.write_work(DATE, "items.json", b"{}")
    store.write_work(DATE, "items.json", b"{}")
    with store.night(DATE):
        pass
    assert not dead.work(DATE).exists()
    assert store.work(DATE).exists() and store.run.startswith(f"{os.getpid()}.")


def test_local_source_folders_and_location_checks(tmp_path):
    inbox = tmp_path / "inbox"
    write_batch(inbox, DATE, seed=1)
    (inbox / f"batch_date={DATE}" / "notes.txt").write_text("stray")
    store = LocalStore(inbox, tmp_path / "out")
    assert store.source_folders(DATE) == sorted(p.name for p in (inbox / f"batch_date={DATE}").glob("source_id=*"))
    assert store.batch_exists(DATE) and not store.batch_exists("2026-11-04")
    with pytest.raises(ConfigError, match="inside the inbox"):
        LocalStore(inbox, inbox / "out").check_locations()


@pytest.fixture
def memory(request):
    pytest.importorskip("airflow.sdk")
    import fsspec
    from airflow.sdk import ObjectStoragePath
    from airflow.sdk.io import attach

    attach("memory", fs=fsspec.filesystem("memory"))
    root = f"memory://truthsieve-store-{request.node.name}"
    yield root
    bucket = ObjectStoragePath(root)
    if bucket.exists():
        bucket.rmdir(recursive=True)


def upload(local: Path, remote) -> None:
    for path in local.rglob("*"):
        if path.is_file():
            target = remote / str(path.relative_to(local))
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(path.read_bytes())


@pytest.mark.airflow
def test_object_store_reads_the_inbox_and_publishes_the_same_night_as_the_local_store(memory, tmp_path):
    from airflow.sdk import ObjectStoragePath

    from truthsieve.airflow import storage
    from truthsieve.pipeline.outputs import batch_location

    inbox = tmp_path / "inbox"
    write_batch(inbox, DATE, seed=2, bend={"south": 16.0})
    config = load_config(write_config(tmp_path / "c.yaml"))
    upload(inbox, ObjectStoragePath(f"{memory}/inbox"))
    store = storage.store_for(f"{memory}/inbox", f"{memory}/out")
    assert type(store).__name__ == "ObjectStore"
    assert store.source_folders(DATE) == LocalStore(inbox, tmp_path / "out").source_folders(DATE)
    with store.local_inbox(DATE, ("source_id=south",)) as root:
        copied = sorted(str(p.relative_to(root)) for p in root.rglob("*") if p.is_file())
    assert copied == [f"batch_date={DATE}/items.parquet", f"batch_date={DATE}/source_id=south/labels.parquet"]

    remote = night.screen_night(store, DATE, config)
    local = night.screen_night(LocalStore(inbox, tmp_path / "out"), DATE, config)
    out = ObjectStoragePath(f"{memory}/out")
    current = batch_location(out, DATE)
    assert ".revisions" in str(current)  # readers follow the pointer to a revision prefix
    assert str(remote.output) == str(out / f"batch_date={DATE}")
    assert (current / "decision.json").read_bytes() == (tmp_path / "out" / f"batch_date={DATE}" / "decision.json").read_bytes()
    assert remote.decision == local.decision and remote.typed == local.typed
    assert store.published_decision(DATE)["batch_date"] == DATE
    assert store.history("2026-11-04", 5)["south"].batches == 1  # the published night is the next night's history
    assert not store.work(DATE).exists()


@pytest.mark.airflow
def test_object_store_work_area_round_trip(memory):
    from truthsieve.airflow import storage

    store = storage.store_for(f"{memory}/inbox", f"{memory}/out")
    store.write_work(DATE, "sources/source_id=a.json", b'{"x": 1}')
    assert store.read_work(DATE, "sources/source_id=a.json") == b'{"x": 1}'
    store.clear_work(DATE)
    assert store.read_work(DATE, "sources/source_id=a.json") is None


@pytest.mark.parametrize("run, synced", [(None, True), ("4242.abcdef", False)])
def test_work_files_are_fsynced_only_in_a_shared_work_area(tmp_path, monkeypatch, run, synced):
    # A shared work area (the DAG's tasks) must survive its writer; a command line's private
    # one dies with its process, so the fsync is skipped there. Counting the calls is the only
    # way to see a durability policy from a test (the bytes are the same either way).
    from truthsieve.pipeline import outputs
    from truthsieve.pipeline.store import LocalStore

    calls = []
    real = os.fsync
    monkeypatch.setattr(outputs.os, "fsync", lambda fd: (calls.append(fd), real(fd))[1])
    (tmp_path / "inbox").mkdir()
    store = LocalStore(tmp_path / "inbox", tmp_path / "out", run=run)
    store.write_work("2026-01-01", "night/fit.json", b'{"rule": 3}')
    assert store.read_work("2026-01-01", "night/fit.json") == b'{"rule": 3}'
    assert bool(calls) is synced


def test_the_index_names_a_night_whose_decision_cannot_be_read_and_lists_the_others(tmp_path):
    from truthsieve.pipeline.outputs import batch_output
    from truthsieve.pipeline.store import write_index

    inbox, out = tmp_path / "inbox", tmp_path / "out"
    write_batch(inbox, DATE, seed=3)
    config = load_config(write_config(tmp_path / "c.yaml"))
    night.screen_night(LocalStore(inbox, out), DATE, config)
    broken = "2026-11-04"
    batch_output(out, broken).mkdir(parents=True)
    (batch_output(out, broken) / "decision.json").write_text('{"batch_date": "2026-11-04"}')  # no route, no sources
    wrong_type, elsewhere = "2026-11-05", "2026-11-06"
    good = json.loads((batch_output(out, DATE) / "decision.json").read_text())
    flagged = [{**s, "pull": None, "flags": ["pulls_fit"]} for s in good["sources"]]  # pulls that cannot be compared
    for date, data in ((wrong_type, {**good, "batch_date": wrong_type, "sources": flagged}),
                       (elsewhere, good)):  # and another night's decision copied here
        batch_output(out, date).mkdir(parents=True)
        (batch_output(out, date) / "decision.json").write_text(json.dumps(data))
    page = write_index(out).read_text()
    assert f"batch_date={DATE}/report.html" in page  # the readable night is listed
    for date in (broken, wrong_type, elsewhere):
        assert f"batch_date={date}/report.html" not in page and f"Not listed: {date}" in page, date
    assert "KeyError" in page and "TypeError" in page and f"the decision of &#x27;{DATE}&#x27;" in page


def test_held_work_given_as_a_function_is_made_only_when_read_or_spilled(tmp_path):
    store = LocalStore(tmp_path / "in", tmp_path / "out", run="3.z")
    made = []

    def table(name):
        return lambda: (made.append(name), name.encode())[1]

    with store.work_in_memory():
        store.write_work(DATE, "sources/a.parquet", table("a"))
        store.write_work(DATE, "sources/b.parquet", table("b"))
        assert made == []  # held: nothing serialised yet
        assert store.read_work(DATE, "sources/a.parquet") == b"a" and store.read_work(DATE, "sources/a.parquet") == b"a"
        assert made == ["a"]  # made once, on the first read
        store.spill_work(DATE)
        assert made == ["a", "b"] and (store.work(DATE) / "sources" / "b.parquet").read_bytes() == b"b"
    store.write_work(DATE, "sources/c.parquet", table("c"))  # not held: made and written at once
    assert made == ["a", "b", "c"] and (store.work(DATE) / "sources" / "c.parquet").read_bytes() == b"c"


def test_a_nested_hold_keeps_the_outer_blocks_work(tmp_path):
    store = LocalStore(tmp_path / "in", tmp_path / "out", run="4.w")
    with store.work_in_memory():
        store.write_work(DATE, "items.json", b"outer")
        with store.work_in_memory():  # e.g. screen_night inside a caller's own block
            store.write_work(DATE, "night/fit.json", b"inner")
        assert store.read_work(DATE, "items.json") == b"outer" and store.read_work(DATE, "night/fit.json") == b"inner"
        assert not (tmp_path / "out").exists()  # still held, still in memory
    assert store.read_work(DATE, "items.json") is None  # the outermost block ends the hold
