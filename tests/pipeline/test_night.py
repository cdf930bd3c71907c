"""The steps of a night (pipeline/night.py) called directly over a LocalStore.

Known answers: the golden decision.json files (written by `truthsieve screen` before the
orchestration rewrite), the inbox files' own bytes and hashes (read here with hashlib and
pyarrow, independently of the pipeline), and the invariant that the steps run one by one
through the work area (as Airflow runs them) publish what screen_night publishes.
"""

from __future__ import annotations

import hashlib
import json
import re
import shutil
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from inboxes import write_batch, write_config, write_labels
from truthsieve.pipeline import night, work_files
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.store import LocalStore

GOLDEN = Path(__file__).resolve().parents[1] / "golden" / "binary"
ADDED_BELOW = re.compile(rb'^[ ]*"below": [^\n]*,\n', re.MULTILINE)
DATE = "2026-11-03"


@pytest.fixture
def golden(tmp_path):
    inbox = tmp_path / "inbox"
    shutil.copytree(GOLDEN / "inbox" / f"batch_date={DATE}", inbox / f"batch_date={DATE}")
    return inbox, load_config(GOLDEN / "config.yaml")


def run_steps_apart(inbox: Path, out: Path, config, draw_key=night.DEMO_KEY):
    """Every step with a fresh store and nothing passed in memory, as separate Airflow tasks run."""
    folders = night.start_night(LocalStore(inbox, out), DATE)
    night.check_items(LocalStore(inbox, out), DATE, config)
    checks = [night.validate_source(LocalStore(inbox, out), DATE, f, config) for f in folders]
    fit = night.fit_consensus(LocalStore(inbox, out), DATE, config)
    for source_id in sorted(c.source_id for c in checks if c.valid):
        night.analyse_source(LocalStore(inbox, out), DATE, config, source_id)
    return fit, night.publish_night(LocalStore(inbox, out), DATE, config, draw_key)


def test_screen_night_gives_the_golden_decision_byte_for_byte(golden, tmp_path, monkeypatch):
    inbox, config = golden
    monkeypatch.setenv("TRUTHSIEVE_DRAW_KEY", "never-read-below-the-edge")  # the steps must not see it
    published = night.screen_night(LocalStore(inbox, tmp_path / "out"), DATE, config, night.DEMO_KEY)
    produced = (tmp_path / "out" / f"batch_date={DATE}" / "decision.json").read_bytes()
    assert ADDED_BELOW.sub(b"", produced) == (GOLDEN / f"decision-{DATE}.json").read_bytes()
    assert published.decision["draw"]["key_source"] == "demo"
    assert not (tmp_path / "out" / ".work").exists()  # one process: the work area never left memory


def test_the_steps_run_apart_through_the_work_area_publish_the_same_night(golden, tmp_path):
    inbox, config = golden
    fit, apart = run_steps_apart(inbox, tmp_path / "apart", config)
    together = night.screen_night(LocalStore(inbox, tmp_path / "together"), DATE, config)
    for name in ("decision.json", "sources.parquet", "report.html", "alerts.json"):
        a = (tmp_path / "apart" / f"batch_date={DATE}" / name).read_bytes()
        assert a == (tmp_path / "together" / f"batch_date={DATE}" / name).read_bytes(), name
    assert fit.summary()["rule"] == apart.decision["consensus"]["rule"]
    assert apart.summary() == {"route": apart.decision["route"], "flagged": [s["source_id"] for s in apart.decision["sources"] if s["flags"]], "output": str(apart.output)}


def test_a_source_in_the_work_area_is_item_codes_into_the_items_table_and_the_inbox_hash(golden, tmp_path):
    inbox, config = golden
    store = LocalStore(inbox, tmp_path / "out")
    folder = night.start_night(store, DATE)[0]
    night.check_items(store, DATE, config)
    night.validate_source(store, DATE, folder, config)
    work = store.work(DATE)
    codes = pq.read_table(work / "sources" / f"{folder}.parquet")
    assert codes.column_names == ["item", "label"] and str(codes.schema.field("item").type) == "int32"
    # Decode with the inbox's own items table, read here independently.
    batch = inbox / f"batch_date={DATE}"
    ids = pq.read_table(batch / "items.parquet").column("item_id").to_pylist()
    label_file = sorted((batch / folder).glob("*.parquet"))[0]
    original = pq.read_table(label_file).to_pylist()
    decoded = [(ids[c], int(v)) for c, v in zip(codes.column("item").to_pylist(), codes.column("label").to_pylist())]
    assert decoded == [(r["item_id"], int(r["label"])) for r in original]
    summary = json.loads((work / "sources" / f"{folder}.json").read_text())
    assert summary["inputs"][0]["sha256"] == hashlib.sha256(label_file.read_bytes()).hexdigest()


def test_a_step_before_its_predecessor_fails_naming_the_missing_step(golden, tmp_path):
    inbox, config = golden
    store = LocalStore(inbox, tmp_path / "out")
    folder = night.start_night(store, DATE)[0]
    with pytest.raises(work_files.StepNotRunError, match="check_items"):
        night.validate_source(store, DATE, folder, config)
    night.check_items(store, DATE, config)
    with pytest.raises(work_files.StepNotRunError, match="not validated"):
        night.fit_consensus(store, DATE, config)


def test_a_missing_night_is_an_input_error(tmp_path):
    from truthsieve.exceptions import InputError

    (tmp_path / "inbox").mkdir()
    with pytest.raises(InputError, match="no such batch folder"):
        night.start_night(LocalStore(tmp_path / "inbox", tmp_path / "out"), DATE)


def test_quarantine_copies_are_the_bytes_validated_not_a_later_reread(tmp_path):
    inbox, config = tmp_path / "inbox", load_config(write_config(tmp_path / "c.yaml"))
    write_batch(inbox, DATE, seed=5)
    bad = write_labels(inbox / f"batch_date={DATE}", "south", ["no-such-item"], [1], name="extra.parquet")
    validated = bad.read_bytes()
    out = tmp_path / "out"
    folders = night.start_night(LocalStore(inbox, out), DATE)
    night.check_items(LocalStore(inbox, out), DATE, config)
    checks = [night.validate_source(LocalStore(inbox, out), DATE, f, config) for f in folders]
    assert [c.source_id for c in checks if not c.valid] == ["south"]
    bad.write_bytes(b"replaced after validation")  # a re-read would copy these bytes
    night.fit_consensus(LocalStore(inbox, out), DATE, config)
    for source_id in sorted(c.source_id for c in checks if c.valid):
        night.analyse_source(LocalStore(inbox, out), DATE, config, source_id)
    published = night.publish_night(LocalStore(inbox, out), DATE, config)
    copy = out / f"batch_date={DATE}" / "quarantine" / "source_id=south" / "extra.parquet"
    assert copy.read_bytes() == validated
    assert "south" in [q["source_id"] for q in published.decision["quarantined"]]


def test_draw_key_from_environment_reads_only_the_mapping_it_is_given():
    assert night.draw_key_from_environment({"TRUTHSIEVE_DRAW_KEY": "s3cret"}) == ("s3cret", False)
    assert night.draw_key_from_environment({}) == night.DEMO_KEY
    assert night.draw_key_from_environment({"TRUTHSIEVE_DRAW_KEY": ""}) == night.DEMO_KEY


def test_send_alerts_delivers_each_message_once_across_a_failed_attempt(tmp_path):
    inbox, config = tmp_path / "inbox", load_config(write_config(tmp_path / "c.yaml"))
    write_batch(inbox, DATE, seed=9, bend={"south": 16.0})  # one bent source: two messages (owner, platform)
    store = LocalStore(inbox, tmp_path / "out")
    night.screen_night(store, DATE, config)
    messages = night.alerts_of(store, DATE)
    assert len(messages) == 2
    delivered, attempts = [], []

    def flaky(message):
        attempts.append(message["subject"])
        if len(attempts) == 2:
            raise ConnectionError("server went away")
        delivered.append(message["subject"])

    with pytest.raises(ConnectionError):
        night.send_alerts(store, DATE, flaky)
    assert night.send_alerts(store, DATE, flaky) == {"sent": 1, "already_sent": 1}
    assert night.send_alerts(store, DATE, flaky) == {"sent": 0, "already_sent": 2}
    assert sorted(delivered) == sorted(m["subject"] for m in messages)
    record = json.loads((tmp_path / "out" / f"batch_date={DATE}" / "alerts_sent.json").read_text())
    assert len(record["sent"]) == 2


def test_an_unreadable_items_table_is_quarantined_from_its_bytes_and_the_night_goes_to_review(tmp_path):
    inbox, config = tmp_path / "inbox", load_config(write_config(tmp_path / "c.yaml"))
    write_batch(inbox, DATE, seed=6)
    items = inbox / f"batch_date={DATE}" / "items.parquet"
    items.write_bytes(b"PAR1 but not really")
    published = night.screen_night(LocalStore(inbox, tmp_path / "out"), DATE, config)
    assert published.route == "review" and published.decision["consensus"] is None
    assert {"source_id": None, "files": [f"batch_date={DATE}/items.parquet"]} in published.decision["quarantined"]
    copy = tmp_path / "out" / f"batch_date={DATE}" / "quarantine" / "items.parquet"
    assert copy.read_bytes() == b"PAR1 but not really"


def _night_without_rule_columns(tmp_path):
    inbox = tmp_path / "inbox"
    write_batch(inbox, DATE, seed=5, n_items=12)  # items.parquet: item_id, moisture_pct, falling_number_s
    return inbox


@pytest.mark.parametrize(
    "rule_class, words, code",
    [
        ({"kind": "listed"}, ["rule_class.kind 'listed'", "rule__<name>", DATE], "table_lacks_column"),
        ({"kind": "threshold", "features": ["moisture_pct", "protein_pct"]}, ["rule_class.features", "protein_pct", DATE], "table_lacks_feature"),
    ],
)
def test_check_items_refuses_columns_the_night_lacks_as_a_configuration_error(tmp_path, rule_class, words, code):
    # the command line's check (cli._check_features), now also the first thing check_items does:
    # an Airflow run sees one night, so that night's items table is the whole range
    from truthsieve.exceptions import ConfigError

    inbox, out = _night_without_rule_columns(tmp_path), tmp_path / "out"
    config = load_config(write_config(tmp_path / "c.yaml", rule_class=rule_class))
    store = LocalStore(inbox, out)
    night.start_night(store, DATE)
    with pytest.raises(ConfigError) as refused:
        night.check_items(store, DATE, config)
    assert "\n" not in str(refused.value) and all(w in str(refused.value) for w in words)
    with pytest.raises(work_files.StepNotRunError):  # refused before anything reached the work area
        work_files.read_items(store, DATE)
    # the command line checked the whole range itself: the night's own input error, quarantined
    check = night.check_items(store, DATE, config, columns_checked=True)
    assert not check.valid and [e.code for e in check.errors] == [code]


def test_check_items_accepts_a_listed_night_with_rule_columns(tmp_path):
    inbox, out = _night_without_rule_columns(tmp_path), tmp_path / "out"
    items = inbox / f"batch_date={DATE}" / "items.parquet"
    table = pq.read_table(items)
    dry = pa.array(table.column("moisture_pct").to_numpy() <= 14.0)
    pq.write_table(table.append_column("rule__dry", dry), items)
    config = load_config(write_config(tmp_path / "c.yaml", rule_class={"kind": "listed"}))
    store = LocalStore(inbox, out)
    night.start_night(store, DATE)
    assert night.check_items(store, DATE, config).valid
