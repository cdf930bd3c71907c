"""``pipeline/outputs.py`` on its own: atomic writes under real write failures, publish and
recovery, the per-date lock, history and the published dates (real files, real processes).

A write that fails midway is made real with the file-size limit (``RLIMIT_FSIZE``) of a
child process: the kernel lets the first bytes of a write through and then fails it
(``EFBIG``; or ``SIGXFSZ`` kills the writer, when that signal has its default action). Root
ignores a read-only folder, so that limit is the failure used here.
"""

from __future__ import annotations

import errno
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from truthsieve.core.source_checks import SourceHistory
from truthsieve.exceptions import BatchLockedError, InputError
from truthsieve.pipeline import outputs
from truthsieve.pipeline.outputs import (
    batch_output, date_lock, dumps_decision, parquet_bytes, publish, published_dates, read_history, recover, write_atomic, write_index_page,
)

DATE = "2026-11-03"
LIMIT = 4096  # bytes a child may write to any one file
BIG = 64 * 1024  # > LIMIT: the write gets LIMIT bytes through, then fails

_LIMITED = """
import resource, signal, sys
from pathlib import Path
from truthsieve.pipeline import outputs
# Python ignores SIGXFSZ (the write then fails with EFBIG); "kill" restores the kernel's default
signal.signal(signal.SIGXFSZ, signal.SIG_IGN if sys.argv[1] == "ignore" else signal.SIG_DFL)
resource.setrlimit(resource.RLIMIT_FSIZE, ({limit}, resource.getrlimit(resource.RLIMIT_FSIZE)[1]))
try:
    {call}
except OSError as error:
    print(error.errno)
    sys.exit(3)
"""


def limited(call: str, how: str, *args: str) -> subprocess.CompletedProcess:
    """Run ``call`` in a child whose files may not grow past LIMIT bytes (set after its imports)."""
    script = _LIMITED.format(limit=LIMIT, call=call)
    env = dict(os.environ, PYTHONDONTWRITEBYTECODE="1")
    return subprocess.run([sys.executable, "-c", script, how, *args], capture_output=True, text=True, env=env, timeout=120)


# --- write_atomic --------------------------------------------------------------------------


@pytest.mark.parametrize("how", ["ignore", "kill"])
def test_a_write_failing_midway_leaves_the_previous_file_whole(tmp_path, how):
    path = tmp_path / "decision.json"
    previous = b'{"night": "previous"}\n' * 40  # 880 bytes, below the limit
    path.write_bytes(previous)
    result = limited(f"outputs.write_atomic(Path(sys.argv[2]), b'n' * {BIG})", how, str(path))
    if how == "ignore":
        assert (result.returncode, result.stdout.strip()) == (3, str(errno.EFBIG)), result.stderr  # "File too large"
    else:
        assert result.returncode == -signal.SIGXFSZ, result.stderr  # killed by the kernel in mid-write
    assert path.read_bytes() == previous
    # whatever the failed writer left has a temporary name, never the file's own
    assert all(p.name.startswith(".decision.json.") and p.name.endswith(".tmp") for p in tmp_path.iterdir() if p != path)


def test_a_write_that_raises_removes_its_temporary(tmp_path):
    # at <out>/ (ledger.jsonl, in_force.json) no recovery would ever remove a partial temporary
    path = tmp_path / "ledger.jsonl"
    path.write_bytes(b"line 1\n")
    result = limited(f"outputs.write_atomic(Path(sys.argv[2]), b'n' * {BIG})", "ignore", str(path))
    assert result.returncode == 3, result.stderr  # the writer lived on and saw the error: it could clean up
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ledger.jsonl"]


def test_a_first_write_failing_midway_leaves_no_file_under_the_name(tmp_path):
    path = tmp_path / "index.html"
    result = limited(f"outputs.write_atomic(Path(sys.argv[2]), b'n' * {BIG})", "ignore", str(path))
    assert result.returncode == 3, result.stderr
    assert not path.exists()  # readers see the whole file or none


def test_a_write_replaces_the_file_whole(tmp_path):
    path = tmp_path / "decision.json"
    path.write_bytes(b"old, and longer than the new content")
    write_atomic(path, b"new")
    assert path.read_bytes() == b"new"
    assert [p.name for p in tmp_path.iterdir()] == ["decision.json"]  # no temporary left


def test_a_scratch_write_is_atomic_too(tmp_path):
    path = tmp_path / "fit.json"
    write_atomic(path, b"{}", durable=False)
    assert path.read_bytes() == b"{}" and [p.name for p in tmp_path.iterdir()] == ["fit.json"]


def test_canonical_json_is_sorted_indented_utf8_and_refuses_nan():
    # worked by hand: sorted keys, indent 2, non-ASCII kept as UTF-8 (ä = C3 A4), one final newline
    assert dumps_decision({"b": 1, "a": [1.5, "grä"]}) == b'{\n  "a": [\n    1.5,\n    "gr\xc3\xa4"\n  ],\n  "b": 1\n}\n'
    with pytest.raises(ValueError):
        dumps_decision({"ratio": float("nan")})


def test_parquet_bytes_are_a_parquet_file():
    table = pa.table({"item_id": ["lot-1", "lot-2"], "label": [1, 0]})
    data = parquet_bytes(table)
    # Apache Parquet format specification (parquet-format, "File Format"): a file starts and ends with
    # the 4-byte magic "PAR1" (from memory of the specification; pyarrow's reader below agrees)
    assert data[:4] == b"PAR1" and data[-4:] == b"PAR1"
    assert pq.read_table(pa.BufferReader(data)).equals(table)


# --- publish and recover -------------------------------------------------------------------


def test_a_publish_failing_midway_leaves_the_previous_night_published_and_recover_clears_it(tmp_path):
    out = tmp_path / "out"
    publish(out, DATE, {"decision.json": b"previous night", "report.html": b"<p>previous</p>"})
    before = os.readlink(batch_output(out, DATE))
    result = limited(
        f"outputs.publish(Path(sys.argv[2]), {DATE!r}, {{'decision.json': b'x' * 10, 'report.html': b'r' * {BIG}}})", "ignore", str(out)
    )
    assert result.returncode == 3, result.stderr
    final = batch_output(out, DATE)
    assert os.readlink(final) == before  # the visible night did not move
    assert (final / "decision.json").read_bytes() == b"previous night" and (final / "report.html").read_bytes() == b"<p>previous</p>"
    revisions = sorted(p.name for p in (out / ".revisions").iterdir())
    assert len(revisions) == 2  # the published one and the half-written one
    recover(out, DATE)
    assert [p.name for p in (out / ".revisions").iterdir()] == [os.path.basename(before)]
    assert (final / "decision.json").read_bytes() == b"previous night"


def test_publish_refuses_a_plain_file_where_the_night_goes(tmp_path):
    final = batch_output(tmp_path, DATE)
    final.write_bytes(b"someone's file")
    with pytest.raises(InputError, match="exists and is not a batch output folder"):
        publish(tmp_path, DATE, {"decision.json": b"{}"})
    assert final.read_bytes() == b"someone's file"


def test_publish_writes_nested_files_and_points_a_relative_link_at_the_revision(tmp_path):
    final = publish(tmp_path, DATE, {"decision.json": b"{}", "quarantine/source_id=a/labels.parquet": b"bad"})
    assert final == tmp_path / f"batch_date={DATE}"
    target = os.readlink(final)
    assert not os.path.isabs(target) and target.startswith(f".revisions/batch_date={DATE}.")  # the out folder can move
    assert (final / "quarantine" / "source_id=a" / "labels.parquet").read_bytes() == b"bad"


def test_recover_puts_back_a_plain_folder_left_renamed_away_and_clears_staging(tmp_path):
    # an old two-rename swap killed between its renames: the night sits in .staging as *.previous
    previous = tmp_path / ".staging" / f"batch_date={DATE}.abc.previous"
    previous.mkdir(parents=True)
    (previous / "decision.json").write_bytes(b"the night")
    os.symlink("nowhere", tmp_path / ".staging" / f"batch_date={DATE}.abc.link")  # a temporary link
    (tmp_path / ".staging" / f"batch_date={DATE}.def").mkdir()  # a legacy staging folder
    recover(tmp_path, DATE)
    assert (batch_output(tmp_path, DATE) / "decision.json").read_bytes() == b"the night"
    assert list((tmp_path / ".staging").iterdir()) == []


def test_recover_touches_only_its_own_date(tmp_path):
    publish(tmp_path, DATE, {"decision.json": b"{}"})
    other = "2026-11-04"
    orphan = tmp_path / ".revisions" / f"batch_date={other}.dead"  # another night's, maybe being written now
    orphan.mkdir()
    staged = tmp_path / ".staging" / f"batch_date={other}.beef.link"
    staged.parent.mkdir(exist_ok=True)
    os.symlink("nowhere", staged)
    recover(tmp_path, DATE)
    assert orphan.is_dir() and staged.is_symlink()


def test_recover_of_a_night_never_published_removes_its_revisions(tmp_path):
    dead = tmp_path / ".revisions" / f"batch_date={DATE}.dead"
    dead.mkdir(parents=True)
    (dead / "decision.json").write_bytes(b"half")
    recover(tmp_path, DATE)
    assert not dead.exists() and not batch_output(tmp_path, DATE).exists()


def test_the_index_write_removes_temporaries_of_killed_writers(tmp_path):
    stale = tmp_path / ".index.html.0123abcd.tmp"
    stale.write_bytes(b"half an index")
    path = write_index_page(tmp_path, b"<html>index</html>")
    assert path == tmp_path / "index.html" and path.read_bytes() == b"<html>index</html>"
    assert not stale.exists()


# --- the per-date lock -----------------------------------------------------------------------


def test_the_date_lock_times_out_with_a_clear_error(tmp_path):
    with date_lock(tmp_path, DATE, timeout=5):
        assert (tmp_path / ".locks" / f"batch_date={DATE}.lock").is_file()
        started = time.monotonic()
        # a second open file description: flock makes it wait like another process would
        with pytest.raises(BatchLockedError) as locked:
            with date_lock(tmp_path, DATE, timeout=0.2):
                pass
        assert time.monotonic() - started >= 0.2  # it waited the timeout out (a lower bound: safe when busy)
        assert str(locked.value) == f"batch {DATE} is locked by another run"
        with date_lock(tmp_path, "2026-11-04", timeout=0.2):
            pass  # another date is not held
    with date_lock(tmp_path, DATE, timeout=0.2):
        pass  # released on leaving the block


def test_the_date_lock_holds_across_processes(tmp_path):
    holder = subprocess.Popen(
        [sys.executable, "-c", (
            "import sys\nfrom truthsieve.pipeline.outputs import date_lock\n"
            f"with date_lock(sys.argv[1], {DATE!r}, timeout=60):\n    print('held', flush=True)\n    sys.stdin.read()\n"
        ), str(tmp_path)],
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "held"  # blocks until the child holds the lock
        with pytest.raises(BatchLockedError, match=f"batch {DATE} is locked by another run"):
            with date_lock(tmp_path, DATE, timeout=0.2):
                pass
        holder.stdin.close()  # the child leaves its block and exits
        with date_lock(tmp_path, DATE, timeout=60):  # waits for the release, polling with a bound
            pass
    finally:
        holder.kill() if holder.poll() is None else None
        holder.wait(timeout=60)


# --- what readers see: published dates and history ----------------------------------------------


def _sources_parquet(rows: list[tuple[str, int, int, int]]) -> bytes:
    names = ["source_id", "items", "positives", "disagreements"]
    return parquet_bytes(pa.table({n: [r[k] for r in rows] for k, n in enumerate(names)}))


def test_published_dates_list_whole_nights_oldest_first(tmp_path):
    publish(tmp_path, "2026-11-05", {"decision.json": b"{}"})
    publish(tmp_path, "2026-11-03", {"decision.json": b"{}"})
    (tmp_path / "batch_date=2026-11-04").mkdir()  # a folder without a decision is not a night
    (tmp_path / ".revisions" / "batch_date=2026-11-06.dead").mkdir()  # nor a revision nothing points to
    (tmp_path / ".revisions" / "batch_date=2026-11-06.dead" / "decision.json").write_bytes(b"{}")
    assert published_dates(tmp_path) == ["2026-11-03", "2026-11-05"]
    assert published_dates(str(tmp_path)) == ["2026-11-03", "2026-11-05"]


def test_history_pools_the_latest_nights_of_the_window_before_the_date(tmp_path):
    publish(tmp_path, "2026-11-01", {"decision.json": b"{}", "sources.parquet": _sources_parquet([("a", 10, 4, 1), ("b", 20, 5, 2)])})
    publish(tmp_path, "2026-11-02", {"decision.json": b"{}", "sources.parquet": _sources_parquet([("a", 30, 6, 3)])})
    publish(tmp_path, "2026-11-03", {"decision.json": b"{}"})  # no sources table (e.g. items table invalid): skipped
    publish(tmp_path, "2026-11-04", {"decision.json": b"{}", "sources.parquet": _sources_parquet([("a", 40, 7, 4)])})
    publish(tmp_path, "2026-11-05", {"decision.json": b"{}", "sources.parquet": _sources_parquet([("a", 99, 99, 99)])})
    # before 11-05, window 2: the nights with a table are 11-01, 11-02, 11-04 -> the latest two, 11-02 and 11-04
    # a: batches 2, items 30 + 40 = 70, positives 6 + 7 = 13, disagreements 3 + 4 = 7; b only on 11-01
    assert read_history(tmp_path, "2026-11-05", 2) == {"a": SourceHistory(2, 70, 13, 7)}
    # before 11-02, any window: 11-01 only
    assert read_history(tmp_path, "2026-11-02", 7) == {"a": SourceHistory(1, 10, 4, 1), "b": SourceHistory(1, 20, 5, 2)}
    # before 11-01: nothing earlier
    assert read_history(tmp_path, "2026-11-01", 7) == {}


def test_batch_location_of_a_local_night_is_its_folder(tmp_path):
    publish(tmp_path, DATE, {"decision.json": b"{}"})
    (batch_output(tmp_path, DATE) / "_current.json").write_text(json.dumps({"revision": "elsewhere"}))
    # an object store's pointer is not followed on a local path: the symlink already names the revision
    assert outputs.batch_location(tmp_path, DATE) == Path(tmp_path) / f"batch_date={DATE}"
    assert outputs.batch_location(str(tmp_path), DATE) == Path(tmp_path) / f"batch_date={DATE}"


def test_a_rename_that_fails_leaves_no_temporary(tmp_path):
    # a folder where the file should go: the rename is refused after the bytes were written
    (tmp_path / "in_force.json").mkdir()
    with pytest.raises(OSError):
        write_atomic(tmp_path / "in_force.json", b"{}")
    assert [p.name for p in tmp_path.iterdir()] == ["in_force.json"] and (tmp_path / "in_force.json").is_dir()


# --- canonical JSON: the direct writer against the standard library's indented encoder ---

from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

_json_scalars = st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False, allow_infinity=False) | st.text()
_json_values = st.recursive(
    _json_scalars,
    lambda inner: st.lists(inner, max_size=4) | st.lists(inner, max_size=4).map(tuple) | st.dictionaries(st.text(max_size=6), inner, max_size=4),
    max_leaves=30,
)


def _stdlib_canonical(value) -> bytes:
    """The definition ``dumps_decision`` must match byte for byte (Python's json module)."""
    return (json.dumps(value, sort_keys=True, indent=2, allow_nan=False, ensure_ascii=False) + "\n").encode()


@settings(max_examples=400, deadline=None)
@given(_json_values)
def test_dumps_decision_writes_the_standard_librarys_bytes(value):
    assert dumps_decision(value) == _stdlib_canonical(value)


@pytest.mark.parametrize("value", [
    {"a": float("nan")}, [1, float("inf")], {"x": {1: "int key"}}, {"x": {1: "a", "b": 2}}, {"when": object()}, {"n": True.__class__},
])
def test_dumps_decision_raises_or_writes_as_the_standard_library_does(value):
    """Values outside the direct writer's set (NaN, non-str keys, mixed keys, other
    objects) go to json.dumps: the same bytes, or the same exception type."""
    try:
        expected = _stdlib_canonical(value)
    except (ValueError, TypeError) as error:
        with pytest.raises(type(error)):
            dumps_decision(value)
    else:
        assert dumps_decision(value) == expected


def test_dumps_decision_keeps_a_published_decision_byte_identical(tmp_path):
    """A decision as the screen writes it (nested sources, rules, floats, unicode notes)."""
    decision = {
        "batch_date": "2026-01-01", "sources": [{"source_id": f"fa\u00efrm-{i}", "gain": i / 7, "rule": {"feature": "moisture", "threshold": -0.0, "above": 1}, "flags": []} for i in range(50)],
        "mechanism": {"lottery": [{"probability": 1 / 3, "risk": 1e-300}, {"probability": 2 / 3, "risk": 12345678901234567890}]}, "notes": ["line\nbreak \u2028 \"quoted\""],
    }
    assert dumps_decision(decision) == _stdlib_canonical(decision)
