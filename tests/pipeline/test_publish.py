"""``outputs.publish`` in-process: revision layout, migration of a plain folder, carried records."""

from __future__ import annotations

import os

from truthsieve.pipeline.outputs import batch_output, publish, read_history, recover

DATE = "2026-11-03"


def test_a_plain_folder_from_before_revisions_is_replaced_in_one_step_without_debris(tmp_path):
    final = batch_output(tmp_path, DATE)
    final.mkdir(parents=True)
    (final / "decision.json").write_bytes(b"old")
    (final / "stale.parquet").write_bytes(b"stale")
    publish(tmp_path, DATE, {"decision.json": b"new", "quarantine/errors.json": b"[]"})
    assert final.is_symlink() and os.readlink(final).startswith(".revisions/")
    assert sorted(str(p.relative_to(final)) for p in final.rglob("*") if p.is_file()) == ["decision.json", "quarantine/errors.json"]
    assert (final / "decision.json").read_bytes() == b"new"
    assert list((tmp_path / ".staging").iterdir()) == []
    assert len(list((tmp_path / ".revisions").iterdir())) == 1


def test_a_republish_keeps_only_the_new_revision_and_carries_the_alert_record(tmp_path):
    publish(tmp_path, DATE, {"decision.json": b"one", "alerts_sent.json": b'{"sent": []}'})
    first = os.readlink(batch_output(tmp_path, DATE))
    publish(tmp_path, DATE, {"decision.json": b"two"})
    final = batch_output(tmp_path, DATE)
    assert os.readlink(final) != first
    assert (final / "decision.json").read_bytes() == b"two"
    assert (final / "alerts_sent.json").read_bytes() == b'{"sent": []}'
    assert [p.name for p in (tmp_path / ".revisions").iterdir()] == [os.path.basename(os.readlink(final))]


def test_recover_removes_an_unreferenced_revision_and_history_ignores_it(tmp_path):
    publish(tmp_path, DATE, {"decision.json": b"{}"})
    orphan = tmp_path / ".revisions" / f"batch_date={DATE}.deadbeef"
    orphan.mkdir()
    (orphan / "sources.parquet").write_bytes(b"not parquet")
    assert read_history(tmp_path, "2026-12-01", 7) == {}  # only what the symlink names is read
    recover(tmp_path, DATE)
    assert not orphan.exists() and batch_output(tmp_path, DATE).is_dir()
