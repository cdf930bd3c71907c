"""build_label_matrix: every label lands in its (source, item) cell, from the long table
(Arrow joins) and from each source's item codes (what validation hands over)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from truthsieve.core import build_label_matrix
from truthsieve.core.labels import SourceCodes
from truthsieve.exceptions import ClassIndexError, InputError, NoItemsError, NoSourcesError, UnknownReferenceError


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


# ---- each source's item codes (what validation hands over) ----
def _random_night(seed: int, n_classes: int = 3):
    """A night with partial coverage, items labelled by several sources, a shuffled items
    table and sources in no particular order; returns (items, codes per source, long rows)."""
    rng = np.random.default_rng(seed)
    n_items = int(rng.integers(1, 40))
    items = pd.DataFrame({
        "item_id": [f"it{k:02d}" for k in rng.permutation(n_items)],
        "item_weight": np.round(rng.uniform(0.1, 5.0, n_items), 2),
    })
    names = [n for n in ["zeta", "alpha", "Zed", "mid", "beta", "b.2", "b-1"] if rng.random() < 0.7] or ["solo"]
    sources, rows = [], []
    for name in rng.permutation(names):
        rows_of = rng.permutation(n_items)[: int(rng.integers(1, n_items + 1))]  # rows of the items table
        labels = rng.integers(0, n_classes, len(rows_of)).astype(np.int8)
        sources.append(SourceCodes(str(name), rows_of, labels))
        rows += [(items["item_id"][r], str(name), int(y)) for r, y in zip(rows_of, labels)]
    return items, sources, rows


@pytest.mark.parametrize("seed", range(12))
def test_the_matrix_from_item_codes_is_the_long_tables_and_the_cells_by_hand(seed):
    items, sources, rows = _random_night(seed)
    weights = {s.source_id: 1.0 + k for k, s in enumerate(sorted(sources, key=lambda s: s.source_id))}
    from_codes = build_label_matrix(sources, items, weights, n_classes=3)
    long = pd.DataFrame(rows, columns=["item_id", "source_id", "label"]).sample(frac=1.0, random_state=seed)
    from_long = build_label_matrix(long, items, weights, n_classes=3)
    for name in ("item_ids", "labels", "labelled", "item_weights", "source_weights"):
        assert getattr(from_codes, name).tobytes() == getattr(from_long, name).tobytes(), name
    assert from_codes.source_ids == from_long.source_ids and from_codes.n_classes == 3
    assert from_codes.global_costs().tobytes() == from_long.global_costs().tobytes()
    # By hand: sources in Python's string order ("Zed" before "alpha"), items by id, each
    # (source, item) cell from its row; everything else unlabelled and 0.
    order = sorted({s for _, s, _ in rows})
    ids = sorted(items["item_id"])
    assert list(from_codes.source_ids) == order and from_codes.item_ids.tolist() == ids
    expected = np.zeros((len(order), len(ids)), dtype=np.int8)
    seen = np.zeros((len(order), len(ids)), dtype=bool)
    for item, source, label in rows:
        expected[order.index(source), ids.index(item)], seen[order.index(source), ids.index(item)] = label, True
    assert (from_codes.labels == expected).all() and (from_codes.labelled == seen).all()
    weight_of = dict(zip(items["item_id"], items["item_weight"]))
    assert from_codes.item_weights.tolist() == [weight_of[i] for i in ids]


def test_item_codes_that_break_the_night_are_named():
    items = pd.DataFrame({"item_id": ["b", "a"], "item_weight": [1.0, 0.0]})
    with pytest.raises(ClassIndexError, match=r"label 3 in row 1 of source 'lab' is not a class index 0..2"):
        build_label_matrix([SourceCodes("lab", np.array([0, 1]), np.array([2, 3]))], items, {"lab": 1.0}, n_classes=3)
    with pytest.raises(UnknownReferenceError, match="'lab'.*outside the items table"):
        build_label_matrix([SourceCodes("lab", np.array([2]), np.array([1]))], items, {"lab": 1.0})
    with pytest.raises(InputError, match="twice"):
        build_label_matrix([SourceCodes("lab", np.array([0]), np.array([1]))] * 2, items, {"lab": 1.0})
    with pytest.raises(NoSourcesError):
        build_label_matrix([], items, {"lab": 1.0})
    with pytest.raises(NoItemsError, match="lab"):  # row 1 is item "a", of weight 0
        build_label_matrix([SourceCodes("lab", np.array([1]), np.array([1]))], items, {"lab": 1.0})
    with pytest.raises(UnknownReferenceError, match="ghost"):
        build_label_matrix([SourceCodes("ghost", np.array([0]), np.array([1]))], items, {"lab": 1.0})


def test_class_indices_past_127_keep_their_value_in_the_matrix():
    # 200 classes: an int8 matrix would wrap index 150 to -106 (common practice: int8 holds -128..127).
    import numpy as np
    import pandas as pd

    from truthsieve.core.labels import SourceCodes, build_label_matrix

    items = pd.DataFrame({"item_id": ["a", "b", "c"]})
    codes = [SourceCodes("s", np.array([0, 1, 2]), np.array([150, 199, 3], dtype=np.int16))]
    matrix = build_label_matrix(codes, items, {"s": 1.0}, n_classes=200)
    assert matrix.labels.tolist() == [[150, 199, 3]]
    long = pd.DataFrame({"item_id": ["a", "b", "c"], "source_id": "s", "label": [150, 199, 3]})
    assert build_label_matrix(long, items, {"s": 1.0}, n_classes=200).labels.tolist() == [[150, 199, 3]]
    two = build_label_matrix([SourceCodes("s", np.array([0, 1]), np.array([1, 0]))], items, {"s": 1.0})
    assert two.labels.dtype == np.int8  # two classes keep one byte a cell
