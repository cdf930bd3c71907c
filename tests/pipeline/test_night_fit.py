"""``pipeline/night_fit.py`` on its own: ``read_fit`` rebuilds, from the work area and the items
table alone, the same :class:`Fit` that ``fit_consensus`` returned, on a night worked by hand."""

from __future__ import annotations

import numpy as np
import pytest

from hand_night import DATE, hand_night
from truthsieve.core.mechanisms import ConsensusFit
from truthsieve.pipeline import night
from truthsieve.pipeline.night_fit import Fit, read_fit
from truthsieve.pipeline.store import LocalStore
from truthsieve.pipeline.work_files import StepNotRunError

# worked by hand in hand_night's docstring
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
