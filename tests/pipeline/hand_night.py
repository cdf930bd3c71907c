"""A three-item, three-source night whose fit is worked by hand (for the night_fit and source_pool tests)."""

from __future__ import annotations

import pyarrow as pa
import pyarrow.parquet as pq
import yaml

from inboxes import write_labels
from truthsieve.pipeline import night
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.store import LocalStore

DATE = "2026-11-03"


def hand_night(tmp_path, validate: bool = True):
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
    if validate:
        validate_night(store, config)
    return store, config


def validate_night(store, config) -> None:
    """The steps before the fit: the items table, then each source folder."""
    folders = night.start_night(store, DATE)
    index = night.item_index(night.check_items(store, DATE, config))
    for folder in folders:
        night.validate_source(store, DATE, folder, config, index)
