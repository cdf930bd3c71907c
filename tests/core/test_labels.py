"""build_label_matrix: the Arrow joins put every label in its (source, item) cell."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from truthsieve.core import build_label_matrix
from truthsieve.exceptions import UnknownReferenceError


@pytest.mark.parametrize("seed", range(8))
def test_cells_match_the_long_table_whatever_the_row_and_source_order(seed):
    rng = np.random.default_rng(seed)
    n_items, sources = 30, ["zeta", "alpha", "mid", "beta"]
    items = pd.DataFrame({"item_id": [f"it{k:02d}" for k in rng.permutation(n_items)]})
    rows = [(f"it{j:02d}", s, int(rng.integers(0, 2))) for s in sources for j in range(n_items) if rng.random() < 0.7]
    labels = pd.DataFrame(rows, columns=["item_id", "source_id", "label"]).sample(frac=1.0, random_state=seed)
    matrix = build_label_matrix(labels, items, {s: 1.0 for s in sources})
    assert matrix.source_ids == ("alpha", "beta", "mid", "zeta")
    assert matrix.item_ids.tolist() == [f"it{k:02d}" for k in range(n_items)]
    # Expected cells straight from the rows: item "itNN" sits in column NN.
    expected_labels = np.zeros((4, n_items), dtype=np.int8)
    expected_labelled = np.zeros((4, n_items), dtype=bool)
    for item, source, label in rows:
        row, column = matrix.source_ids.index(source), int(item[2:])
        expected_labels[row, column], expected_labelled[row, column] = label, True
    assert (matrix.labels == expected_labels).all()
    assert (matrix.labelled == expected_labelled).all()


def test_a_label_on_an_unknown_item_is_named():
    labels = pd.DataFrame({"item_id": ["a", "ghost"], "source_id": ["s", "s"], "label": [1, 0]})
    with pytest.raises(UnknownReferenceError, match="ghost"):
        build_label_matrix(labels, pd.DataFrame({"item_id": ["a"]}), {"s": 1.0})
