"""The split path (per-source statistics, summed, then one source at a time) gives the same
floats as the whole-night path, bit for bit: the lead's mapped tasks rely on it."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from inboxes import SOURCES, write_config
from truthsieve.core.incentives import incentive_context, source_incentive
from truthsieve.core.mechanisms import run_from_statistics, run_mechanism
from truthsieve.pipeline import analysis
from truthsieve.pipeline.config import load_config


def night(seed: int, n_classes: int):
    rng = np.random.default_rng(seed)
    n_items = int(rng.integers(30, 200))
    moisture = np.round(rng.uniform(10, 18, n_items), int(rng.integers(0, 2)))
    falling = np.round(rng.uniform(150, 450, n_items))
    items = pd.DataFrame({"item_id": [f"lot-{k:05d}" for k in rng.permutation(n_items)], "moisture_pct": moisture, "falling_number_s": falling})
    if seed % 2:
        items["item_weight"] = rng.choice([0.5, 1.0, 2.5], n_items)
    edges = np.linspace(12, 16, n_classes + 1)[1:-1]
    for r in range(3):
        items[f"rule__r{r}"] = np.digitize(moisture + rng.normal(0, 0.5), edges)
    truth = np.digitize(moisture, edges)
    rows = []
    for s in SOURCES:
        covered = np.flatnonzero(rng.random(n_items) < rng.uniform(0.3, 1.0))
        covered = covered if len(covered) else np.array([0])
        noisy = rng.random(n_items) < 0.15
        labels = np.where(noisy, rng.integers(0, n_classes, n_items), truth)
        rows.append(pd.DataFrame({"item_id": items["item_id"].to_numpy()[covered], "source_id": s, "label": labels[covered]}))
    return pd.concat(rows, ignore_index=True).sample(frac=1.0, random_state=seed), items


@pytest.mark.parametrize("n_classes", [2, 3])
@pytest.mark.parametrize("kind", ["constant", "threshold", "listed"])
@pytest.mark.parametrize("seed", range(6))
def test_split_path_equals_the_whole_night_bit_for_bit(seed, kind, n_classes, tmp_path):
    rule_class = {"kind": kind, "features": ["moisture_pct", "falling_number_s"]} if kind == "threshold" else {"kind": kind}
    config = load_config(write_config(tmp_path / "c.yaml", rule_class=rule_class))
    labels, items = night(seed, n_classes)
    budget = config.analysis.incentive_budget

    matrix, whole_class, whole_fit = analysis.prepare(labels, items, config, n_classes=n_classes)
    shared = incentive_context(matrix, whole_class)
    whole = [source_incentive(matrix, whole_class, whole_fit, i, budget, shared) for i in range(matrix.n_sources)]

    items_of_night = analysis.night_items(items, config, n_classes=n_classes)
    present = sorted(set(labels["source_id"]))
    weights = analysis.source_weights(config, present)
    # Each source on its own (as a mapped task would), handed over in a scrambled order.
    statistics = [
        analysis.source_statistics(labels[labels["source_id"] == s], s, items_of_night, weights[s]) for s in reversed(present)
    ]
    totals = analysis.sum_statistics(statistics, items_of_night)
    assert totals.tobytes() == matrix.global_costs().tobytes()
    fit = analysis.fit_from_totals(totals, items_of_night)
    assert fit == whole_fit
    assert items_of_night.rule_class.describe(fit.rule) == whole_class.describe(whole_fit.rule)
    by_id = {s.source_id: s for s in statistics}
    split = [analysis.analyse_one_source(totals, by_id[s], items_of_night, fit, budget) for s in present]
    assert split == whole  # dataclass equality: every float identical

    ordered = [by_id[s] for s in present]
    for mechanism in ("random_dictator", "weighted_dictator", "tuned_dictator"):
        assert run_from_statistics(mechanism, totals, ordered, items_of_night.rule_class) == run_mechanism(mechanism, matrix, whole_class, whole_fit)


def test_split_steps_name_bad_input(tmp_path):
    from truthsieve.exceptions import ClassIndexError, UnknownReferenceError

    config = load_config(write_config(tmp_path / "c.yaml", rule_class={"kind": "constant"}))
    items = pd.DataFrame({"item_id": ["a", "b"]})
    night_of = analysis.night_items(items, config, n_classes=3)
    with pytest.raises(UnknownReferenceError, match="'lab' on unknown item 'ghost'"):
        analysis.source_statistics(pd.DataFrame({"item_id": ["a", "ghost"], "label": [0, 1]}), "lab", night_of, 1.0)
    with pytest.raises(ClassIndexError, match="'lab'.*0..2"):
        analysis.source_statistics(pd.DataFrame({"item_id": ["a", "b"], "label": [0, 3]}), "lab", night_of, 1.0)
