"""The command line's edges: usage errors in one line, strict dates, a closed pipe, apply's refusals."""

from __future__ import annotations

import os
import subprocess
import sys

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from cli_support import one_line_error
from inboxes import cli, write_batch, write_config

DATE = "2026-11-03"



@pytest.mark.parametrize(
    "args, words",
    [
        (["screen", "--inbox", "i", "--config", "c", "--out", "o"], "--date"),  # a required flag missing
        (["screen", "--inbox", "i", "--date", "20261103", "--config", "c", "--out", "o"], "YYYY-MM-DD"),  # Python would read it
        (["screen", "--inbox", "i", "--date", "2026-13-01", "--config", "c", "--out", "o"], "YYYY-MM-DD"),
        (["screen", "--inbox", "i", "--date", DATE, "--config", "c", "--out", "o", "--lock-timeout", "-5"], "seconds"),
        (["verdict", "--out", "o", "--date", DATE, "--by", "x"], "--approve"),
        (["no-such-command"], "invalid choice"),
    ],
)
def test_usage_errors_are_one_line_and_exit_2(args, words):
    assert words in one_line_error(cli(*args))


def test_a_reader_that_goes_away_gets_no_traceback(published):
    _, out, _ = published
    read_end, write_end = os.pipe()
    os.close(read_end)  # every write to the pipe now fails with EPIPE, as after `| head` exits
    try:
        result = subprocess.run(
            [sys.executable, "-m", "truthsieve.pipeline.cli", "in-force", "--out", str(out)],
            stdout=write_end, stderr=subprocess.PIPE, text=True,
        )
    finally:
        os.close(write_end)
    assert result.returncode == 1
    assert "Traceback" not in result.stderr and "BrokenPipeError" not in result.stderr, result.stderr


@pytest.fixture(scope="module")
def published(tmp_path_factory):
    root = tmp_path_factory.mktemp("apply-edges")
    write_batch(root / "inbox", DATE, seed=8)
    out = root / "out"
    result = cli("screen", "--inbox", str(root / "inbox"), "--date", DATE, "--config", str(write_config(root / "c.yaml")), "--out", str(out))
    assert result.returncode == 0, result.stderr
    items = root / "inbox" / f"batch_date={DATE}" / "items.parquet"
    return root, out, items


def test_apply_never_overwrites_a_file_it_did_not_write(published):
    root, out, items = published
    other = root / "someone-elses.parquet"
    pq.write_table(pa.table({"x": [1]}), other)
    before = other.read_bytes()
    assert "refusing to overwrite" in one_line_error(cli("apply", "--out", str(out), "--items", str(items), "--write", str(other)))
    assert other.read_bytes() == before
    mine = root / "labels.parquet"
    assert cli("apply", "--out", str(out), "--items", str(items), "--write", str(mine)).returncode == 0
    assert cli("apply", "--out", str(out), "--items", str(items), "--write", str(mine)).returncode == 0  # its own output: rewritten


def test_apply_refuses_a_missing_folder_and_repeated_item_ids(published):
    root, out, items = published
    missing = root / "no-such-folder" / "labels.parquet"
    assert "does not exist" in one_line_error(cli("apply", "--out", str(out), "--items", str(items), "--write", str(missing)))
    assert not missing.parent.exists()
    table = pq.read_table(items)
    repeated = root / "repeated.parquet"
    pq.write_table(pa.concat_tables([table, table.slice(4, 1)]), repeated)  # its last row repeats row 5
    message = one_line_error(cli("apply", "--out", str(out), "--items", str(repeated), "--write", str(root / "r.parquet")))
    assert f"row {table.num_rows + 1}, column 'item_id'" in message


def test_a_verdict_on_a_missing_out_folder_leaves_nothing_behind(tmp_path):
    missing = tmp_path / "never-published"
    message = one_line_error(cli("verdict", "--out", str(missing), "--date", DATE, "--approve", "--by", "Greta Voss"))
    assert "no such out folder" in message and not missing.exists()
