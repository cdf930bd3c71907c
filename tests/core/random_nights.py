"""Seeded random nights for the incentive tests: K classes, partial coverage, uneven item
and source weights, rounded features (tied values), one rule-shaped liar."""

from __future__ import annotations

import numpy as np
import pandas as pd

from truthsieve.core import build_label_matrix, build_rule_class

FEATURES = ["f0", "f1", "f2"]


def random_night(seed: int, n_classes: int, kind: str = "threshold"):
    rng = np.random.default_rng(seed)
    n_items = int(rng.integers(15, 160))
    n_sources = int(rng.integers(2, 6))
    features = {f: np.round(rng.normal(0, 1, n_items), int(rng.integers(0, 3))) for f in FEATURES}
    items = pd.DataFrame({"item_id": [f"i{k:04d}" for k in rng.permutation(n_items)], **features})
    if seed % 3:
        items["item_weight"] = rng.choice([0.5, 1.0, 2.0, 3.0], n_items)
    for r in range(int(rng.integers(1, 5))):
        items[f"rule__r{r}"] = np.digitize(features["f0"], np.sort(rng.normal(0, 1, n_classes - 1)))
    edges = np.sort(rng.normal(0, 0.7, n_classes - 1))
    truth = np.digitize(features["f0"] + 0.5 * features["f1"], edges)
    rows = []
    for s in range(n_sources):
        coverage = 1.0 if seed % 2 else rng.uniform(0.2, 1.0)
        covered = np.flatnonzero(rng.random(n_items) < coverage)
        if len(covered) == 0:
            covered = np.array([0])
        if s == 0:  # a rule-shaped liar
            labels = np.digitize(features[FEATURES[seed % 3]], edges + rng.normal(0, 0.3))
        else:
            noisy = rng.random(n_items) < rng.uniform(0.0, 0.4)
            labels = np.where(noisy, rng.integers(0, n_classes, n_items), truth)
        frame = {"item_id": items["item_id"].to_numpy()[covered], "source_id": f"s{s}", "label": labels[covered].astype(int)}
        rows.append(pd.DataFrame(frame))
    weights = {f"s{s}": float(rng.choice([1.0, 2.0, 0.5, 3.0])) for s in range(n_sources)}
    matrix = build_label_matrix(pd.concat(rows, ignore_index=True), items, weights, n_classes=n_classes)
    rule_class = build_rule_class(kind, items, matrix.item_ids, FEATURES if kind == "threshold" else (), n_classes)
    return matrix, rule_class
