"""Configured values reach the published output: routing.confidence sets the Wilson intervals."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from inboxes import write_config
from truthsieve.pipeline.analysis import analyse_batch
from truthsieve.pipeline.config import load_config


def test_routing_confidence_changes_the_published_interval_as_statsmodels_computes_it(tmp_path):
    from statsmodels.stats.proportion import proportion_confint

    # 40 items, threshold at moisture 14 for three sources; "east" disagrees on items 0..7.
    moisture = np.linspace(10.0, 18.0, 40)
    truth = (moisture <= 14.0).astype(int)
    items = pd.DataFrame({"item_id": [f"lot-{k}" for k in range(40)], "moisture_pct": moisture, "falling_number_s": 300.0})
    rows = []
    for source in ("lab", "north", "south", "east"):
        labels = truth.copy()
        if source == "east":
            labels[:8] = 1 - labels[:8]
        rows += [{"item_id": f"lot-{k}", "source_id": source, "label": int(v)} for k, v in enumerate(labels)]
    labels = pd.DataFrame(rows)

    intervals = {}
    for confidence in (0.95, 0.80):
        config = load_config(write_config(tmp_path / f"c{confidence}.yaml", routing={"confidence": confidence}))
        analysis = analyse_batch(labels, items, config, {})
        east = next(s for s in analysis.sources if s.source_id == "east")
        assert east.disagreements == 8 and east.items == 40
        intervals[confidence] = (east.disagreement_low, east.disagreement_high)
        expected = proportion_confint(8, 40, alpha=1 - confidence, method="wilson")
        assert intervals[confidence] == pytest.approx(expected, abs=1e-12)
    assert intervals[0.80][1] - intervals[0.80][0] < intervals[0.95][1] - intervals[0.95][0]
