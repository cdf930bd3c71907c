"""Object-store publishing on fsspec's in-memory file system (``memory://``): a writer that
dies at any step leaves readers a whole night (the previous one or the new one)."""

from __future__ import annotations

import json

import pytest

pytestmark = pytest.mark.airflow

DATE = "2026-11-03"
OLD = {"decision.json": b'{"night": "old"}', "sources.parquet": b"old-sources", "aggregate.parquet": b"old-aggregate"}
NEW = {"decision.json": b'{"night": "new"}', "sources.parquet": b"new-sources", "review.json": b"new-review", "quarantine/errors.json": b"[]"}


class Killed(BaseException):
    """Stands in for SIGKILL inside one process (the in-memory store dies with a real kill)."""


@pytest.fixture
def bucket(request):
    import fsspec
    from airflow.sdk import ObjectStoragePath
    from airflow.sdk.io import attach

    attach("memory", fs=fsspec.filesystem("memory"))
    return ObjectStoragePath(f"memory://truthsieve-crash-{request.node.name.replace('[', '-').rstrip(']')}")


def files_under(folder) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in folder.rglob("*") if p.is_file()} if folder.exists() else {}


def seen_by_readers(out) -> dict[str, bytes]:
    from truthsieve.pipeline.outputs import batch_location

    return files_under(batch_location(out, DATE))


def mirror(out) -> dict[str, bytes]:
    from truthsieve.pipeline.outputs import POINTER

    return {k: v for k, v in files_under(out / f"batch_date={DATE}").items() if k != POINTER}


def kill_at(monkeypatch, step: str) -> None:
    from truthsieve.pipeline import outputs

    def crash_point(reached: str) -> None:
        if reached == step:
            raise Killed(step)

    monkeypatch.setattr(outputs, "crash_point", crash_point)


def revisions(out) -> list[str]:
    folder = out / ".revisions" / f"batch_date={DATE}"
    return sorted(p.name for p in folder.iterdir()) if folder.exists() else []


STEPS = ["object_revision_started", "object_revision_written", "object_pointer_switched", "object_mirror_started", "object_mirror_file_written", "object_mirrored"]


@pytest.mark.parametrize("step", STEPS)
def test_a_writer_killed_at_any_step_leaves_a_whole_night_and_the_next_run_cleans_up(bucket, monkeypatch, step):
    from truthsieve.airflow import storage

    assert list(storage.OBJECT_PUBLISH_STEPS) == STEPS  # every crash point is exercised
    out = bucket / "out"
    storage.publish_objects(str(out), DATE, OLD)
    assert seen_by_readers(out) == OLD == mirror(out)

    kill_at(monkeypatch, step)
    with pytest.raises(Killed):
        storage.publish_objects(str(out), DATE, NEW)
    switched = step not in ("object_revision_started", "object_revision_written")
    # The pointer moves last: before it, readers see the old night whole; after it, the new one.
    assert seen_by_readers(out) == (NEW if switched else OLD), step
    # The contract-path mirror is whole whenever its decision.json is there.
    visible = mirror(out)
    if "decision.json" in visible:
        assert visible in (OLD, NEW), (step, sorted(visible))
    else:
        assert step in ("object_mirror_started", "object_mirror_file_written")

    monkeypatch.undo()
    storage.publish_objects(str(out), DATE, NEW)
    assert seen_by_readers(out) == NEW == mirror(out)
    assert len(revisions(out)) == 1  # dead runs' revisions are gone


def test_history_and_index_follow_the_pointer(bucket, monkeypatch):
    from truthsieve.airflow import storage
    from truthsieve.pipeline.outputs import POINTER, published_dates

    out = bucket / "out"
    storage.publish_objects(str(out), DATE, OLD)
    kill_at(monkeypatch, "object_mirror_started")
    with pytest.raises(Killed):
        storage.publish_objects(str(out), DATE, NEW)
    # No decision.json on the contract path, yet the night is published (behind the pointer).
    assert not (out / f"batch_date={DATE}" / "decision.json").exists()
    assert published_dates(out) == [DATE]
    pointer = json.loads((out / f"batch_date={DATE}" / POINTER).read_text())
    assert pointer["files"] == sorted(NEW)


def test_alert_records_survive_a_republish(bucket):
    from truthsieve.airflow import storage

    out = bucket / "out"
    storage.publish_objects(str(out), DATE, {**OLD, "alerts_sent.json": b'{"sent": []}'})
    storage.publish_objects(str(out), DATE, NEW)
    assert seen_by_readers(out)["alerts_sent.json"] == b'{"sent": []}'
