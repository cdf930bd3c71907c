"""One process's decide step reuses the consensus step's sparse labels, summed costs and fit.

Known answer: the same night decided from the intake alone (labels re-joined, matrix
rebuilt, consensus refitted) gives every output file byte for byte, on the golden night
and on a night where sources label different parts of the items.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

from inboxes import write_batch, write_config, write_labels
from truthsieve.pipeline import analysis, night
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.records import Intake
from truthsieve.pipeline.screen import decide_night
from truthsieve.pipeline.store import LocalStore

GOLDEN = Path(__file__).resolve().parents[1] / "golden" / "binary"


def golden_night(tmp_path: Path):
    date = "2026-11-09"
    shutil.copytree(GOLDEN / "inbox" / f"batch_date={date}", tmp_path / "inbox" / f"batch_date={date}")
    return tmp_path / "inbox", date, load_config(GOLDEN / "config.yaml")


def partial_night(tmp_path: Path):
    date = "2026-03-04"
    inbox = tmp_path / "inbox"
    folder = write_batch(inbox, date, seed=5, n_items=300)
    rng = np.random.default_rng(2)
    moisture = pq.read_table(folder / "items.parquet").column("moisture_pct").to_numpy()
    for source in ("farm-a", "farm-b"):
        keep = np.flatnonzero(rng.random(300) < 0.4)
        write_labels(folder, source, [f"lot-{k:05d}" for k in keep], moisture[keep] <= 14.5)
    config = load_config(write_config(tmp_path / "config.yaml"))
    return inbox, date, config


def held_fit(inbox: Path, date: str, config, out: Path):
    store = LocalStore(inbox, out)
    with store.work_in_memory():
        folders = night.start_night(store, date)
        items = night.check_items(store, date, config, columns_checked=True)
        index = night.item_index(items)
        intake = Intake(date, items, [night.validate_source(store, date, f, config, index) for f in folders])
        fit = night.fit_consensus(store, date, config, intake)
        incentives = [night.analyse_source(store, date, config, s, fit) for s in fit.source_ids]
    return intake, fit, incentives


@pytest.mark.parametrize("make", [golden_night, partial_night])
def test_the_decide_step_gives_the_same_files_with_the_held_fit(make, tmp_path, monkeypatch):
    inbox, date, config = make(tmp_path)
    if make is partial_night:
        raw = config.model_dump()
        raw["sources"] = raw["sources"] + [{"source_id": s, "weight": 1.5} for s in ("farm-a", "farm-b")]
        config = type(config).model_validate(raw)
    intake, fit, incentives = held_fit(inbox, date, config, tmp_path / "out")
    assert len(fit.sources) == len(intake.valid_sources) >= 3
    if make is partial_night:
        assert len({len(s.items) for s in fit.sources.values()}) > 1  # sources label different items

    built = []
    whole = analysis.build_label_matrix
    monkeypatch.setattr(analysis, "build_label_matrix", lambda *a, **k: built.append(1) or whole(*a, **k))
    reused = decide_night(intake, config, {}, incentives, rule_class=fit.rule_class, fit=fit)
    assert built == []  # nothing rebuilt
    assert all(a is fit.sources[a.source_id] for a in reused.analysis.matrix.sources)
    rebuilt = decide_night(intake, config, {}, incentives, rule_class=fit.rule_class)
    assert built == [1]
    assert reused.files.keys() == rebuilt.files.keys()
    for name in reused.files:
        assert reused.files[name] == rebuilt.files[name], name
    np.testing.assert_array_equal(reused.analysis.matrix.labels, rebuilt.analysis.matrix.labels)
    np.testing.assert_array_equal(reused.analysis.matrix.labelled, rebuilt.analysis.matrix.labelled)


def test_a_fit_without_every_sources_labels_is_not_reused(tmp_path):
    inbox, date, config = golden_night(tmp_path)
    intake, fit, incentives = held_fit(inbox, date, config, tmp_path / "out")
    partial = type(fit)(fit.night, fit.consensus, fit.totals, fit.global_risks, fit.weights, fit.ranks, {})
    decided = decide_night(intake, config, {}, incentives, rule_class=fit.rule_class, fit=partial)
    assert all(s is not fit.sources[s.source_id] for s in decided.analysis.matrix.sources)
