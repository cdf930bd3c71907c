"""`truthsieve screen` / `backfill` with an object-store URL for --out, through the DAG's
`store_for`: the same decision.json bytes as a local run and as the golden files, refusals
as one line with exit 2, and no Airflow import for plain paths.

The golden files (tests/golden/binary/, see tests/pipeline/test_golden_binary.py) were written
by a local `truthsieve screen` with the built-in demo key; a URL run of the same night must
match them byte for byte (the `below` key K classes added is removed first, as there).
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
import uuid
from pathlib import Path

import pytest

from cli_support import one_line_error
from truthsieve.pipeline.cli import main

pytestmark = pytest.mark.airflow

GOLDEN = Path(__file__).resolve().parents[1] / "golden" / "binary"
NIGHTS = ["2026-11-03", "2026-11-09", "2026-11-15"]
ADDED_BELOW = re.compile(rb'^[ ]*"below": [^\n]*,\n', re.MULTILINE)


@pytest.fixture
def night_files(tmp_path, monkeypatch):
    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    inbox = tmp_path / "inbox"
    for night in NIGHTS:
        shutil.copytree(GOLDEN / "inbox" / f"batch_date={night}", inbox / f"batch_date={night}")
    config = tmp_path / "config.yaml"
    shutil.copyfile(GOLDEN / "config.yaml", config)
    return inbox, config


def cli(*args: str, prelude: str = "") -> subprocess.CompletedProcess:
    """The real command line in a child process (``prelude`` runs first, in that process)."""
    env = {k: v for k, v in os.environ.items() if k != "TRUTHSIEVE_DRAW_KEY"}
    code = f"{prelude}\nimport sys\nfrom truthsieve.pipeline.cli import main\nsys.exit(main(sys.argv[1:]))"
    return subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True, env=env, timeout=300)



def local_decision(inbox: Path, config: Path, night: str, out: Path) -> bytes:
    assert main(["screen", "--inbox", str(inbox), "--date", night, "--config", str(config), "--out", str(out)]) == 0
    return (out / f"batch_date={night}" / "decision.json").read_bytes()


def memory_root():
    from airflow.sdk import ObjectStoragePath

    return ObjectStoragePath(f"memory://truthsieve-cli-{uuid.uuid4().hex[:8]}/out")


def test_a_file_url_out_through_the_real_command_line_gives_the_local_bytes(night_files, tmp_path):
    inbox, config = night_files
    night = NIGHTS[0]
    out = tmp_path / "url-out"
    result = cli("screen", "--inbox", f"file://{inbox}", "--date", night, "--config", str(config), "--out", f"file://{out}")
    assert result.returncode == 0, result.stderr
    produced = (out / f"batch_date={night}" / "decision.json").read_bytes()
    assert produced == local_decision(inbox, config, night, tmp_path / "local-out")
    assert ADDED_BELOW.sub(b"", produced) == (GOLDEN / f"decision-{night}.json").read_bytes()
    assert (out / "index.html").is_file() and (out / "ledger.jsonl").is_file()  # a local store keeps the ledger


@pytest.mark.parametrize("night", NIGHTS)
def test_a_memory_url_out_in_process_gives_the_local_and_golden_bytes(night, night_files, tmp_path, capsys):
    from truthsieve.pipeline.outputs import batch_location

    inbox, config = night_files
    root = memory_root()
    assert main(["screen", "--inbox", str(inbox), "--date", night, "--config", str(config), "--out", str(root)]) == 0
    assert f"outputs: {root}/batch_date={night}" in capsys.readouterr().out
    mirrored = (root / f"batch_date={night}" / "decision.json").read_bytes()
    assert batch_location(root, night).name != f"batch_date={night}"  # the pointer names a revision prefix
    assert (batch_location(root, night) / "decision.json").read_bytes() == mirrored
    assert mirrored == local_decision(inbox, config, night, tmp_path / "local-out")
    assert ADDED_BELOW.sub(b"", mirrored) == (GOLDEN / f"decision-{night}.json").read_bytes()
    assert (root / "index.html").is_file()
    assert not (root / ".work").exists() or not list((root / ".work").rglob("*"))  # the private work area is gone
    assert not [p for p in root.iterdir() if p.name.startswith(".truthsieve-probe-")]  # the write probe is removed


def test_backfill_to_a_memory_url_publishes_every_night_and_the_index(night_files, tmp_path, capsys):
    # A backfill's later night reads the earlier one's history (drift): its bytes are a local
    # backfill's, not the golden file's (each golden night was screened alone).
    inbox, config = night_files
    root, local = memory_root(), tmp_path / "local-out"
    for out in (str(root), str(local)):
        code = main(["backfill", "--inbox", str(inbox), "--from", NIGHTS[0], "--to", NIGHTS[1], "--config", str(config), "--out", out])
        assert code == 0, capsys.readouterr().err
    for night in NIGHTS[:2]:  # 2026-11-03 to 2026-11-09: both golden nights in the range are published
        produced = (root / f"batch_date={night}" / "decision.json").read_bytes()
        assert produced == (local / f"batch_date={night}" / "decision.json").read_bytes()
    assert b"drift_" in produced  # the second night did read the first one's history from the store
    assert ADDED_BELOW.sub(b"", (root / f"batch_date={NIGHTS[0]}" / "decision.json").read_bytes()) == (GOLDEN / f"decision-{NIGHTS[0]}.json").read_bytes()
    assert not (root / f"batch_date={NIGHTS[2]}").exists()
    index = (root / "index.html").read_text()
    assert NIGHTS[0] in index and NIGHTS[1] in index
    printed = capsys.readouterr().out
    assert f"history:     {root}/index.html" in printed and f"history:     {local}/index.html" in printed


def test_plain_paths_do_not_import_airflow_and_urls_do(night_files, tmp_path):
    inbox, config = night_files
    check = "import atexit, sys\natexit.register(lambda: print('airflow' in sys.modules, file=sys.stderr))"
    plain = cli("screen", "--inbox", str(inbox), "--date", NIGHTS[0], "--config", str(config), "--out", str(tmp_path / "o"), prelude=check)
    assert plain.returncode == 0 and plain.stderr.strip().splitlines()[-1] == "False", plain.stderr
    url = cli("screen", "--inbox", str(inbox), "--date", NIGHTS[0], "--config", str(config), "--out", f"file://{tmp_path / 'u'}", prelude=check)
    assert url.returncode == 0 and url.stderr.strip().splitlines()[-1] == "True", url.stderr


@pytest.mark.parametrize(
    ("url", "words"),
    [
        ("nosuchscheme://bucket/prefix", "Unsupported filesystem: 'nosuchscheme'"),
        ("file://relative/out", "must be absolute"),
        ("file:///proc/truthsieve-cannot-be-made", "cannot be created or written"),
    ],
)
def test_unusable_out_urls_are_one_line_refusals(url, words, night_files):
    inbox, config = night_files
    message = one_line_error(cli("screen", "--inbox", str(inbox), "--date", NIGHTS[0], "--config", str(config), "--out", url))
    assert message.startswith(f"error: --out ") and words in message, message


def test_an_s3_url_without_its_file_system_package_is_a_one_line_refusal(night_files):
    pytest.importorskip("airflow")
    if __import__("importlib").util.find_spec("s3fs") is not None:
        pytest.skip("s3fs is installed: the probe would try the network")
    inbox, config = night_files
    message = one_line_error(cli("screen", "--inbox", str(inbox), "--date", NIGHTS[0], "--config", str(config), "--out", "s3://bucket/prefix"))
    assert "s3://bucket/prefix" in message and "s3fs" in message


def test_a_file_url_inside_the_inbox_is_refused_and_not_created(night_files):
    inbox, config = night_files
    out = inbox / "outputs"
    message = one_line_error(cli("backfill", "--inbox", str(inbox), "--from", NIGHTS[0], "--to", NIGHTS[0], "--config", str(config), "--out", f"file://{out}"))
    assert "lies inside the inbox" in message
    assert not out.exists()


def test_a_file_url_naming_a_file_is_refused(night_files, tmp_path):
    inbox, config = night_files
    (tmp_path / "a-file").write_text("not a folder")
    message = one_line_error(cli("screen", "--inbox", str(inbox), "--date", NIGHTS[0], "--config", str(config), "--out", f"file://{tmp_path / 'a-file'}"))
    assert "is a file, not a folder" in message


def test_a_memory_url_naming_an_object_is_refused_before_any_work(night_files, capsys):
    inbox, config = night_files
    root = memory_root()
    root.parent.mkdir(parents=True, exist_ok=True)
    root.write_bytes(b"an object, not a prefix")
    assert main(["screen", "--inbox", str(inbox), "--date", NIGHTS[0], "--config", str(config), "--out", str(root)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "is an object, not a folder" in err[0], err
    assert root.read_bytes() == b"an object, not a prefix"


def test_a_bucket_that_refuses_writes_is_a_one_line_refusal(night_files, capsys):
    # A real bucket cannot be reached from here: a memory file system whose writes fail with
    # the PermissionError an access-denied PUT gives stands in for it (common practice for
    # fsspec back ends: s3fs maps 403 to PermissionError, from memory).
    import fsspec
    import fsspec.implementations.memory as memory

    class RefusingFileSystem(memory.MemoryFileSystem):
        protocol = "refusing"

        def _open(self, path, mode="rb", **kwargs):
            if "w" in mode or "a" in mode:
                raise PermissionError(f"Access Denied: {path}")
            return super()._open(path, mode, **kwargs)

    fsspec.register_implementation("refusing", RefusingFileSystem, clobber=True)
    inbox, config = night_files
    assert main(["screen", "--inbox", str(inbox), "--date", NIGHTS[0], "--config", str(config), "--out", "refusing://bucket/out"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "cannot be reached or written" in err[0] and "Access Denied" in err[0], err


def test_missing_airflow_is_a_one_line_refusal(night_files, tmp_path):
    # Airflow made unimportable in the child: what a CLI-only install sees.
    inbox, config = night_files
    hide = "import sys\nsys.modules['airflow'] = None"
    message = one_line_error(cli("screen", "--inbox", str(inbox), "--date", NIGHTS[0], "--config", str(config), "--out", "memory://b/out", prelude=hide))
    assert "need Airflow" in message
    # a plain path still works without it
    assert cli("screen", "--inbox", str(inbox), "--date", NIGHTS[0], "--config", str(config), "--out", str(tmp_path / "o"), prelude=hide).returncode == 0


def test_an_object_store_inbox_is_a_one_line_refusal(night_files):
    inbox, config = night_files
    message = one_line_error(cli("screen", "--inbox", "memory://b/inbox", "--date", NIGHTS[0], "--config", str(config), "--out", "memory://b/out"))
    assert "--inbox memory://b/inbox" in message and "local inbox" in message
