"""``pipeline/night_fit.py`` on its own: ``read_fit`` rebuilds, from the work area and the items
table alone, the same :class:`Fit` that ``fit_consensus`` returned, on a night worked by hand."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import yaml

from inboxes import write_labels
from truthsieve.core.mechanisms import ConsensusFit
from truthsieve.pipeline import night
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.night_fit import Fit, read_fit
from truthsieve.pipeline.store import LocalStore
from truthsieve.pipeline.work_files import StepNotRunError

DATE = "2026-11-03"


def hand_night(tmp_path):
    """Items in table order c, a, b (moisture 12, 14, 16); codes follow the sorted ids: a 0, b 1, c 2.

    Registry weights s1 1, s2 1, s3 2 -> normalised 1/4, 1/4, 1/2. A wrong class on an item
    costs w_i u_j / U_i (u_j = 1):  s1 labels a:1 b:0 (U 2, 1/8 each); s2 labels c:1 (U 1, 1/4);
    s3 labels a:0 b:0 (U 2, 1/4 each). totals[j][k], the cost of class k on item j:
      a: class 0 costs s1's 1/8, class 1 costs s3's 1/4      -> [1/8, 1/4]
      b: class 1 costs s1's 1/8 + s3's 1/4                    -> [0, 3/8]
      c: class 0 costs s2's 1/4                               -> [1/4, 0]
    Rules (cuts at the midpoints 13 and 15): all 0: 3/8; all 1: 5/8; x > 13 -> 0 else 1 (c gets 1):
    1/8 + 0 + 0 = 1/8; x > 13 -> 1 else 0: 1/4 + 3/8 + 1/4 = 7/8; x > 15 -> 0 else 1 (b gets 0):
    1/4 + 0 + 0 = 1/4; x > 15 -> 1 else 0: 1/8 + 3/8 + 1/4 = 3/4. ERM: x > 13 -> 0, risk 1/8.
    """
    inbox = tmp_path / "inbox"
    batch = inbox / f"batch_date={DATE}"
    batch.mkdir(parents=True)
    pq.write_table(pa.table({"item_id": ["c", "a", "b"], "moisture_pct": [12.0, 14.0, 16.0]}), batch / "items.parquet")
    write_labels(batch, "s1", ["a", "b"], [1, 0])
    write_labels(batch, "s2", ["c"], [1])
    write_labels(batch, "s3", ["a", "b"], [0, 0])
    path = tmp_path / "config.yaml"
    path.write_text(yaml.safe_dump({
        "rule_class": {"kind": "threshold", "features": ["moisture_pct"]}, "mechanism": "tuned_dictator",
        "sources": [{"source_id": "s1", "weight": 1.0}, {"source_id": "s2", "weight": 1.0}, {"source_id": "s3", "weight": 2.0}],
    }))
    config = load_config(path)
    store = LocalStore(inbox, tmp_path / "out")
    for folder in night.start_night(store, DATE):
        night.validate_source(store, DATE, folder, config, night.item_index(night.check_items(store, DATE, config)))
    return store, config


HAND_TOTALS = [[0.125, 0.25], [0.0, 0.375], [0.25, 0.0]]
HAND_RULE = {"kind": "threshold", "feature": "moisture_pct", "cut": 13.0, "above": 0, "below": 1}


def test_read_fit_rebuilds_the_fit_that_fit_consensus_wrote(tmp_path):
    store, config = hand_night(tmp_path)
    written = night.fit_consensus(store, DATE, config)
    # a fresh store over the same folders: what an analyse_source task in another process has
    read = read_fit(LocalStore(store.inbox, store.out), DATE, config)

    assert written.totals.tolist() == HAND_TOTALS
    assert read.totals.dtype == written.totals.dtype and read.totals.shape == (3, 2)
    assert read.totals.tobytes() == written.totals.tobytes()  # exactly the same floats
    assert read.consensus == written.consensus
    assert read.consensus.risk == 0.125 and read.rule_class.describe(read.consensus.rule) == HAND_RULE
    assert read.global_risks.tobytes() == written.global_risks.tobytes()
    assert sorted(read.global_risks.tolist()) == [0.125, 0.25, 0.375, 0.625, 0.75, 0.875]  # the six rules above
    assert read.weights == written.weights == {"s1": 0.25, "s2": 0.25, "s3": 0.5}
    assert read.source_ids == ["s1", "s2", "s3"]
    assert read.ranks.tolist() == written.ranks.tolist() == [2, 0, 1]  # table rows c, a, b -> codes 2, 0, 1
    assert read.night.item_ids.tolist() == written.night.item_ids.tolist() == ["a", "b", "c"]
    assert read.night.item_weights.tolist() == [1.0, 1.0, 1.0]
    size = read.rule_class.size
    assert size == written.rule_class.size == 6  # 2 constants + 2 cuts x 2 (above, below) pairs
    assert [read.rule_class.describe(r) for r in range(size)] == [written.rule_class.describe(r) for r in range(size)]
    assert read.sources == {}  # no other source's labels travel with the fit
    assert read.summary() == written.summary() == {"rule": HAND_RULE, "risk": 0.125, "sources": 3}


def test_read_fit_before_the_fit_step_says_which_step_is_missing(tmp_path):
    store, config = hand_night(tmp_path)
    with pytest.raises(StepNotRunError, match="step fit_consensus"):
        read_fit(store, DATE, config)


def test_source_ids_are_sorted_whatever_the_weights_order():
    fit = Fit(night=None, consensus=ConsensusFit(rule=0, risk=0.0), totals=np.zeros((0, 2)), global_risks=np.zeros(2),
              weights={"south": 0.5, "lab": 0.25, "north": 0.25}, ranks=np.zeros(0, dtype=np.int64))
    assert fit.source_ids == ["lab", "north", "south"]
