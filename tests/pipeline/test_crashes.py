"""Deterministic crash injection at every publishing step, and one random-delay SIGKILL.

``TRUTHSIEVE_CRASH_AT=<step>`` (read only by ``outputs.crash_point``, test-only) makes the
real CLI SIGKILL itself at that step. Whatever the step, the date shows either the
previous night's files or the new ones in full, a later night reads the same drift
history, and the next run of the date leaves no debris.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from inboxes import cli, write_batch, write_config
from truthsieve.pipeline.outputs import CRASH_VARIABLE, PUBLISH_STEPS

DATE, NEXT = "2026-11-03", "2026-11-04"


def screen_args(inbox: Path, config: Path, out: Path, date: str = DATE) -> list[str]:
    return ["screen", "--inbox", str(inbox), "--date", date, "--config", str(config), "--out", str(out)]


def visible_state(batch: Path) -> dict[str, bytes]:
    """Every file a reader of ``batch`` sees, by relative path (through the symlink)."""
    if not batch.exists():
        return {}
    return {str(p.relative_to(batch)): p.read_bytes() for p in sorted(batch.rglob("*")) if p.is_file()}


def debris(out: Path) -> list[str]:
    """Anything a dead run could leave: staging entries, unreferenced revisions, temporaries."""
    found = [str(p) for p in (out / ".staging").glob("*")] if (out / ".staging").exists() else []
    found += [str(p) for p in out.rglob("*.tmp")]
    referenced = {os.readlink(p) for p in out.glob("batch_date=*") if p.is_symlink()}
    found += [str(p) for p in (out / ".revisions").glob("*") if f".revisions/{p.name}" not in referenced]
    return found


@pytest.fixture(scope="module")
def nights(tmp_path_factory):
    """Two versions of one night (old = honest, new = one bent source) and a next night;
    references screened without any crash."""
    root = tmp_path_factory.mktemp("nights")
    config = write_config(root / "c.yaml")
    old, new = root / "old", root / "new"
    for inbox, bend in ((old, None), (new, {"south": 15.0})):
        write_batch(inbox, DATE, seed=5, bend=bend)
        write_batch(inbox, NEXT, seed=6)
    references = {}
    for name, inbox in (("old", old), ("new", new)):
        out = root / f"ref-{name}"
        for date in (DATE, NEXT):
            assert cli(*screen_args(inbox, config, out, date)).returncode == 0
        references[name] = {d: visible_state(out / f"batch_date={d}") for d in (DATE, NEXT)}
    assert references["old"][DATE] != references["new"][DATE]
    # The next night's drift history depends on which version of DATE it reads.
    assert references["old"][NEXT]["decision.json"] != references["new"][NEXT]["decision.json"]
    return config, old, new, references


def crash_env(step: str) -> dict:
    return {**os.environ, CRASH_VARIABLE: step}


@pytest.mark.parametrize("step", PUBLISH_STEPS)
def test_a_kill_at_any_publishing_step_keeps_a_whole_night_visible_and_recovers(nights, tmp_path, step):
    config, old, new, references = nights
    out = tmp_path / "out"
    assert cli(*screen_args(old, config, out)).returncode == 0
    crashed = cli(*screen_args(new, config, out), env=crash_env(step))
    assert crashed.returncode == -signal.SIGKILL, (step, crashed.returncode, crashed.stderr[-2000:])
    state = visible_state(out / f"batch_date={DATE}")
    after_swap = step in ("swapped", "published", "index_temporary_written")
    assert state == references["new" if after_swap else "old"][DATE], (step, sorted(state))

    # A later night screened before anyone re-screens DATE reads a whole DATE.
    source = new if after_swap else old
    assert cli(*screen_args(source, config, out, NEXT)).returncode == 0
    assert visible_state(out / f"batch_date={NEXT}")["decision.json"] == references["new" if after_swap else "old"][NEXT]["decision.json"]

    # The next run of DATE publishes the new night and leaves nothing behind.
    assert cli(*screen_args(new, config, out)).returncode == 0
    assert visible_state(out / f"batch_date={DATE}") == references["new"][DATE]
    assert debris(out) == []


def test_a_sigkill_after_a_seeded_random_delay_leaves_old_or_new_and_recovers(nights, tmp_path):
    config, old, new, references = nights
    out = tmp_path / "out"
    assert cli(*screen_args(old, config, out)).returncode == 0
    rng = np.random.default_rng(20261103)
    batch = out / f"batch_date={DATE}"
    for delay in rng.uniform(0.0, 1.5, size=4):
        process = subprocess.Popen([sys.executable, "-m", "truthsieve.pipeline.cli", *screen_args(new, config, out)])
        # Start the clock only once the child is running Python code (its lock file appears
        # after ingest, so poll for the interpreter instead): bounded, no guessed sleep.
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and process.poll() is None:
            if Path(f"/proc/{process.pid}/cmdline").read_bytes().find(b"truthsieve.pipeline.cli") >= 0:
                break
            time.sleep(0.01)
        time.sleep(delay)  # the seeded random moment of the kill, not a wait for a condition
        process.send_signal(signal.SIGKILL)
        process.wait(timeout=60)
        assert visible_state(batch) in (references["old"][DATE], references["new"][DATE])
    assert cli(*screen_args(new, config, out)).returncode == 0
    assert visible_state(batch) == references["new"][DATE]
    assert debris(out) == []


def test_a_file_where_the_date_folder_belongs_is_refused_without_debris(nights, tmp_path):
    config, _, new, _ = nights
    out = tmp_path / "out"
    out.mkdir()
    (out / f"batch_date={DATE}").write_text("not a folder")
    result = cli(*screen_args(new, config, out))
    assert result.returncode == 2 and "not a batch output folder" in result.stderr
    assert "Traceback" not in result.stderr
    assert (out / f"batch_date={DATE}").read_text() == "not a folder"
    assert debris(out) == []
