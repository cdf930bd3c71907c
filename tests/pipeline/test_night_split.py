"""The night split by source: fit_consensus sums each source's labels into the (m, K) totals,
analyse_source reads the totals, the fit and its own labels only, and the command line's
process pool runs that same step with byte-identical results.

Known answers: a two-item night computed by hand (below), the golden decision.json (written
by `truthsieve screen` before the split), and the invariant that a one-process run and a
two-process run of the same inbox publish the same bytes.
"""

from __future__ import annotations

import concurrent.futures
import shutil
from pathlib import Path

import numpy as np
import pytest
import yaml

from inboxes import cli, write_batch, write_config, write_labels
from truthsieve.core import labels as core_labels
from truthsieve.pipeline import analysis, night, source_pool, work_files
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.store import LocalStore

DATE = "2026-11-03"
GOLDEN = Path(__file__).resolve().parents[1] / "golden" / "binary"
NAMES = ("decision.json", "sources.parquet", "report.html", "alerts.json")


def test_fit_consensus_writes_the_hand_computed_totals_and_the_normalised_weights(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    inbox = tmp_path / "inbox"
    batch = inbox / f"batch_date={DATE}"
    batch.mkdir(parents=True)
    # Items in table order y, x: codes follow the sorted ids (x -> 0, y -> 1).
    pq.write_table(pa.table({"item_id": ["y", "x"]}), batch / "items.parquet")
    write_labels(batch, "a", ["x", "y"], [1, 0])
    write_labels(batch, "b", ["x"], [1])
    config_path = tmp_path / "c.yaml"
    config_path.write_text(yaml.safe_dump({"rule_class": {"kind": "constant"}, "mechanism": "weighted_dictator",
                                           "sources": [{"source_id": "a", "weight": 1.0}, {"source_id": "b", "weight": 3.0}]}))
    config = load_config(config_path)
    store = LocalStore(inbox, tmp_path / "out")
    for folder in night.start_night(store, DATE):
        night.validate_source(store, DATE, folder, config, night.item_index(night.check_items(store, DATE, config)))
    fit = night.fit_consensus(store, DATE, config)
    # By hand: w_a = 1/4, w_b = 3/4; U_a = 2, U_b = 1. A wrong class on an item costs w_i u_j / U_i:
    # a: 1/8 per item, b: 3/4. x: a and b say 1, so class 0 costs 1/8 + 3/4 = 7/8; y: a says 0, class 1 costs 1/8.
    totals, risks, record = work_files.read_night_fit(store, DATE)
    assert totals.tolist() == [[0.875, 0.0], [0.0, 0.125]]
    assert record["weights"] == {"a": 0.25, "b": 0.75}
    # Constant rules in order (all 0, all 1): risks 7/8 and 1/8; ERM is "all 1".
    assert risks.tolist() == [0.875, 0.125] and record["rule"] == 1 and record["risk"] == 0.125
    assert fit.summary()["rule"] == {"kind": "constant", "label": 1}


def _steps_apart(inbox: Path, out: Path, config):
    folders = night.start_night(LocalStore(inbox, out), DATE)
    night.check_items(LocalStore(inbox, out), DATE, config)
    checks = [night.validate_source(LocalStore(inbox, out), DATE, f, config) for f in folders]
    night.fit_consensus(LocalStore(inbox, out), DATE, config)
    for source_id in sorted(c.source_id for c in checks if c.valid):
        night.analyse_source(LocalStore(inbox, out), DATE, config, source_id)
    return night.publish_night(LocalStore(inbox, out), DATE, config)


def test_only_the_decide_step_builds_the_label_matrix(tmp_path, monkeypatch):
    inbox = tmp_path / "inbox"
    shutil.copytree(GOLDEN / "inbox" / f"batch_date={DATE}", inbox / f"batch_date={DATE}")
    config = load_config(GOLDEN / "config.yaml")
    builds, step = [], ["before"]
    whole = core_labels.build_label_matrix

    def counted(*args, **kwargs):
        builds.append(step[0])
        return whole(*args, **kwargs)

    monkeypatch.setattr(analysis, "build_label_matrix", counted)
    monkeypatch.setattr(night, "publish_night", _marking(night.publish_night, step, "publish"))
    _steps_apart(inbox, tmp_path / "out", config)
    assert builds == ["publish"]  # fit and every analyse_source task: none


def _marking(function, step, name):
    def marked(*args, **kwargs):
        step[0] = name
        return function(*args, **kwargs)

    return marked


def test_analyse_source_before_the_fit_names_the_missing_step_and_refuses_an_unknown_source(tmp_path):
    inbox, config = tmp_path / "inbox", load_config(write_config(tmp_path / "c.yaml"))
    write_batch(inbox, DATE, seed=3)
    store = LocalStore(inbox, tmp_path / "out")
    for folder in night.start_night(store, DATE):
        night.validate_source(store, DATE, folder, config, night.item_index(night.check_items(store, DATE, config)))
    with pytest.raises(work_files.StepNotRunError, match="fit_consensus"):
        night.analyse_source(store, DATE, config, "lab")
    night.fit_consensus(store, DATE, config)
    with pytest.raises(night.InputError, match="'ghost' is not a valid source"):
        night.analyse_source(store, DATE, config, "ghost")


class RecordingPool(concurrent.futures.ProcessPoolExecutor):
    """The real pool, noting each start so a test knows the pool ran."""

    started: list = []

    def __init__(self, *args, **kwargs):
        RecordingPool.started.append((args[0], args[1].get_start_method()))
        super().__init__(*args, **kwargs)


@pytest.mark.parametrize("kind", ["threshold", "constant"])
def test_two_workers_publish_the_bytes_of_one(tmp_path, monkeypatch, kind):
    rule_class = {"kind": "threshold", "features": ["moisture_pct", "falling_number_s"]} if kind == "threshold" else {"kind": "constant"}
    inbox, config = tmp_path / "inbox", load_config(write_config(tmp_path / "c.yaml", rule_class=rule_class))
    write_batch(inbox, DATE, seed=11, bend={"south": 15.0})
    RecordingPool.started = []
    monkeypatch.setattr(concurrent.futures, "ProcessPoolExecutor", RecordingPool)
    for workers in (1, 2):
        night.screen_night(LocalStore(inbox, tmp_path / f"out{workers}"), DATE, config, workers=workers)
    assert RecordingPool.started == [(2, "forkserver")]  # one pool, for the run with 2 workers
    for name in NAMES:
        one = (tmp_path / "out1" / f"batch_date={DATE}" / name).read_bytes()
        assert one == (tmp_path / "out2" / f"batch_date={DATE}" / name).read_bytes(), name


def test_the_command_line_with_1_and_2_workers_writes_the_same_decision(tmp_path):
    inbox, config = tmp_path / "inbox", write_config(tmp_path / "c.yaml")
    write_batch(inbox, DATE, seed=12, bend={"east": 15.5})
    for workers in ("1", "2"):
        done = cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(config), "--out", str(tmp_path / workers), "--workers", workers)
        assert done.returncode == 0, done.stderr
    for name in NAMES:
        assert (tmp_path / "1" / f"batch_date={DATE}" / name).read_bytes() == (tmp_path / "2" / f"batch_date={DATE}" / name).read_bytes(), name


@pytest.mark.parametrize("value", ["0", "-1", "two"])
def test_a_bad_workers_value_exits_2_with_one_line(tmp_path, value):
    done = cli("screen", "--inbox", str(tmp_path), "--date", DATE, "--config", str(tmp_path / "c.yaml"), "--out", str(tmp_path / "o"), "--workers", value)
    assert done.returncode == 2
    assert len(done.stderr.strip().splitlines()) == 1 and "--workers" in done.stderr and "Traceback" not in done.stderr


def test_pool_size_honours_an_explicit_count_and_sizes_an_automatic_one_by_the_night(monkeypatch):
    monkeypatch.setattr(source_pool, "machine_cores", lambda: 8)
    assert source_pool.pool_size(3, 10, 0) == 3  # asked for: used even on a small night
    assert source_pool.pool_size(3, 2, 0) == 2  # never more processes than sources
    assert source_pool.pool_size(1, 10, 10**9) == 1
    assert source_pool.pool_size(None, 10, source_pool.AUTOMATIC_POOL_LABELS - 1) == 1
    assert source_pool.pool_size(None, 10, source_pool.AUTOMATIC_POOL_LABELS) == 8
    assert source_pool.pool_size(None, 0, 10**9) == 1


def test_per_source_statistics_from_work_area_codes_equal_those_from_item_ids(tmp_path):
    inbox, config = tmp_path / "inbox", load_config(write_config(tmp_path / "c.yaml"))
    write_batch(inbox, DATE, seed=4, n_items=60)
    store = LocalStore(inbox, tmp_path / "out")
    folders = night.start_night(store, DATE)
    items = night.check_items(store, DATE, config)
    checks = [night.validate_source(store, DATE, f, config, night.item_index(items)) for f in folders]
    # Shuffle the items table's rows: codes must still follow the sorted ids.
    shuffled = items.table.sample(frac=1.0, random_state=1).reset_index(drop=True)
    of_night, ranks = analysis.night_items(shuffled, config), analysis.item_ranks(shuffled)
    position = {item: k for k, item in enumerate(shuffled["item_id"])}
    for check in checks:
        rows = np.array([position[i] for i in check.table["item_id"]])
        from_codes = analysis.source_from_codes(check.source_id, rows, check.table["label"].to_numpy(), of_night, ranks, 0.5)
        from_ids = analysis.source_statistics(check.table, check.source_id, of_night, 0.5)
        assert from_codes.items.tolist() == from_ids.items.tolist() and from_codes.classes.tolist() == from_ids.classes.tolist()
        assert from_codes.coverage == from_ids.coverage


def test_a_label_outside_the_classes_in_the_work_area_is_named(tmp_path):
    from truthsieve.exceptions import ClassIndexError

    config = load_config(write_config(tmp_path / "c.yaml", rule_class={"kind": "constant"}))
    import pandas as pd

    items = pd.DataFrame({"item_id": ["b", "a"]})
    of_night, ranks = analysis.night_items(items, config), analysis.item_ranks(items)
    assert ranks.tolist() == [1, 0]  # row 0 ("b") sorts second
    assert analysis.source_from_codes("lab", np.array([0, 1]), np.array([1, 0]), of_night, ranks, 1.0).classes.tolist() == [0, 1]
    with pytest.raises(ClassIndexError, match="'lab'.*0..1"):
        analysis.source_from_codes("lab", np.array([0, 1]), np.array([0, 2]), of_night, ranks, 1.0)
    with pytest.raises(ClassIndexError, match="'lab'"):
        analysis.source_from_codes("lab", np.array([0]), np.array([-1]), of_night, ranks, 1.0)


def test_the_totals_in_the_work_area_are_the_whole_night_matrix_floats(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    rng = np.random.default_rng(21)
    names = [f"s{k}" for k in range(9)]
    inbox = tmp_path / "inbox"
    batch = inbox / f"batch_date={DATE}"
    batch.mkdir(parents=True)
    ids = [f"lot-{k:03d}" for k in rng.permutation(80)]
    weights = np.round(rng.uniform(0.1, 3.0, 80), 2)
    pq.write_table(pa.table({"item_id": ids, "item_weight": weights}), batch / "items.parquet")
    for name in names:
        keep = np.flatnonzero(rng.random(80) < 0.7)
        write_labels(batch, name, [ids[k] for k in keep], rng.integers(0, 2, len(keep)))
    config_path = tmp_path / "c.yaml"
    registry = [{"source_id": n, "weight": float(w)} for n, w in zip(names, np.round(rng.uniform(0.3, 7.0, len(names)), 3))]
    config_path.write_text(yaml.safe_dump({"rule_class": {"kind": "constant"}, "mechanism": "weighted_dictator", "sources": registry}))
    config = load_config(config_path)
    store = LocalStore(inbox, tmp_path / "out")
    for folder in night.start_night(store, DATE):
        night.validate_source(store, DATE, folder, config, night.item_index(night.check_items(store, DATE, config)))
    night.fit_consensus(store, DATE, config)
    totals = work_files.read_night_fit(store, DATE)[0]
    intake = work_files.read_intake(store, DATE)
    matrix = analysis.prepare(intake.labels, intake.items.table, config)[0]
    assert totals.tobytes() == matrix.global_costs().tobytes()
    # The check can fail: summed in another order, these floats differ in the last bits.
    scrambled = np.zeros_like(totals)
    for source in reversed(matrix.sources):
        from truthsieve.core.statistics import add_contribution

        add_contribution(scrambled, source)
    assert scrambled.tobytes() != totals.tobytes()
