"""The segment reachability check (``core/flips.py``) gives every result bit for bit.

Two oracles, both independent of the segment code:

* ``tests/golden/incentives-before-segments.json`` holds every ``SourceIncentive`` of
  the instances below as ``core/incentives.py`` gave them before the segment check
  (commit 5abdf58: every reachability check scored every rule with
  ``ThresholdRules.linear_risks`` and took the first minimum), each field's type and
  ``repr``. Today's analysis must give them exactly: even the sign of a zero counts.
* ``full_reaches`` (score every rule, first minimum) for the check itself, on random
  flips and targets chosen so that both answers occur.

Seeded random instances over K = 2, 3, 4 with partial coverage, uneven item and source
weights, rounded features (tied values) and integer-valued costs (tied risks).
"""

from __future__ import annotations

import json
from dataclasses import asdict
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from truthsieve.core import build_label_matrix, build_rule_class, fit_consensus
from truthsieve.core import flips
from truthsieve.core.flips import FlipSource, full_reaches, global_bins, threshold_reaches
from truthsieve.core.incentives import analyse_source, incentive_context

from random_nights import FEATURES, random_night


BEFORE = json.loads((Path(__file__).parents[1] / "golden" / "incentives-before-segments.json").read_text())["nights"]


def assert_bit_identical(matrix, rule_class, budget, night: str) -> None:
    consensus = fit_consensus(matrix, rule_class)
    shared = incentive_context(matrix, rule_class)
    before = BEFORE[night]
    assert len(before) == matrix.n_sources
    for own, fields_before in zip(matrix.sources, before):
        now = asdict(analyse_source(shared, own, rule_class, consensus, budget))
        assert sorted(now) == sorted(fields_before)
        for name, (kind, text) in fields_before.items():
            assert type(now[name]).__name__ == kind, name
            assert repr(now[name]) == text, (name, own.source_id)


@pytest.mark.parametrize("sparse_flips", [None, 0, 10**9])  # as shipped, always full, always by segments
@pytest.mark.parametrize("budget", [None, 3, 64])
@pytest.mark.parametrize("n_classes", [2, 3, 4])
@pytest.mark.parametrize("seed", range(12))
def test_every_field_equals_the_previous_implementation_bit_for_bit(seed, n_classes, budget, sparse_flips, monkeypatch):
    if sparse_flips is not None:
        monkeypatch.setattr(flips, "SPARSE_FLIPS", sparse_flips)
    matrix, rule_class = random_night(seed, n_classes)
    assert_bit_identical(matrix, rule_class, budget, f"threshold K={n_classes} seed={seed} budget={budget}")


@pytest.mark.parametrize("kind", ["constant", "listed"])
@pytest.mark.parametrize("n_classes", [2, 3])
@pytest.mark.parametrize("seed", range(6))
def test_the_other_classes_are_unchanged_bit_for_bit(seed, n_classes, kind):
    matrix, rule_class = random_night(seed, n_classes, kind)
    assert_bit_identical(matrix, rule_class, None, f"{kind} K={n_classes} seed={seed} budget=None")


@pytest.mark.parametrize("n_classes", [2, 3, 4])
@pytest.mark.parametrize("seed", range(20))
def test_the_segment_check_answers_as_scoring_every_rule(seed, n_classes):
    matrix, rule_class = random_night(100 + seed, n_classes)
    rng = np.random.default_rng(seed)
    consensus = fit_consensus(matrix, rule_class)
    shared = incentive_context(matrix, rule_class)
    answers = []
    for own in matrix.sources:
        source = FlipSource(own, rule_class)
        bins = global_bins(rule_class, source.items)
        base = shared + own.weight * 0.0  # a fresh array: the check must not write into it
        for _ in range(25):
            count = int(rng.integers(0, len(source.items) + 1))
            positions = np.sort(rng.choice(len(source.items), count, replace=False))
            classes = (source.truth[positions] + rng.integers(1, n_classes, count)) % n_classes
            change = source.flip_change(positions, classes)
            risks = np.maximum(shared + own.weight * change, 0.0)
            near = np.flatnonzero(risks <= risks.min() + 1e-10)
            # The first minimum, a later tied or near rule, a constant, a random rule.
            targets = {int(near[0]), int(near[-1]), int(rng.integers(0, n_classes)), int(rng.integers(0, rule_class.size))}
            targets.add(int(np.argsort(risks, kind="stable")[min(1, rule_class.size - 1)]))
            targets.add(consensus.rule)
            rows = source.change_rows(positions, classes)
            for target in sorted(targets):
                expected = full_reaches(shared, own.weight, change, target)
                assert threshold_reaches(rule_class, base, own.weight, rows, bins[:, positions], target) == expected, (
                    own.source_id, count, target)
                assert source.reaches(shared, own.weight, positions, classes, target) == expected
                answers.append(expected)
        np.testing.assert_array_equal(base, shared)
    assert any(answers) and not all(answers)


@pytest.mark.parametrize("seed", range(15))
def test_ties_between_cuts_and_pairs_resolve_as_the_full_pass(seed):
    # Integer costs on few distinct values: exact ties between rules are common, so the
    # tie-break (first rule in class order) decides; the segment check must agree.
    rng = np.random.default_rng(seed)
    n_classes = int(rng.integers(2, 5))
    m = int(rng.integers(3, 40))
    items = pd.DataFrame({"item_id": [f"i{k:03d}" for k in range(m)], "f0": rng.integers(0, 5, m).astype(float)})
    items["f1"] = rng.integers(0, 3, m).astype(float)
    items["f2"] = rng.integers(0, 7, m).astype(float)
    if items["f0"].nunique() == 1:
        items.loc[0, "f0"] = 9.0
    rule_class = build_rule_class("threshold", items, items["item_id"].to_numpy(), FEATURES, n_classes)
    shared = rule_class.linear_risks(rng.integers(0, 3, (m, n_classes)).astype(float))
    labels = rng.integers(0, n_classes, m)
    ids = items["item_id"].to_numpy()
    matrix = build_label_matrix(pd.DataFrame({"item_id": ids, "source_id": "s", "label": labels}), items, {"s": 1.0}, n_classes)
    source = FlipSource(matrix.sources[0], rule_class)
    bins = global_bins(rule_class, source.items)
    for count in range(m + 1):
        positions = np.arange(count)
        classes = (source.truth[positions] + 1) % n_classes
        rows = source.change_rows(positions, classes)
        change = source.flip_change(positions, classes)
        for target in range(rule_class.size):
            expected = full_reaches(shared, 0.5, change, target)
            assert threshold_reaches(rule_class, shared, 0.5, rows, bins[:, positions], target) == expected, (count, target)


def previous_linear_risks(rule_class, costs, items=None):
    """``ThresholdRules.linear_risks`` as it was before it wrote the pairs in place."""
    totals, parts = rule_class._parts(costs, items)
    out = np.empty(rule_class.size)
    out[: rule_class.n_classes] = totals
    above, below = rule_class.pairs[:, 0], rule_class.pairs[:, 1]
    for (alpha, delta), start, stop in zip(parts, rule_class.offsets[:-1], rule_class.offsets[1:]):
        out[start:stop] = rule_class._pair_risks(alpha, delta, above, below).ravel()
    return out


@pytest.mark.parametrize("n_classes", [2, 3, 4])
@pytest.mark.parametrize("seed", range(10))
def test_threshold_risks_are_the_previous_floats_bit_for_bit(seed, n_classes):
    matrix, rule_class = random_night(200 + seed, n_classes)
    rng = np.random.default_rng(seed)
    for costs, items in [
        (matrix.global_costs(), None),
        (rng.normal(size=(matrix.n_items, n_classes)), None),
        (rng.normal(size=(9, n_classes)), np.sort(rng.choice(matrix.n_items, 9, replace=False))),
    ]:
        now, before = rule_class.linear_risks(costs, items), previous_linear_risks(rule_class, costs, items)
        assert now.tobytes() == before.tobytes()


@pytest.mark.parametrize("n_classes", [2, 3, 4])
def test_when_every_rule_ties_only_the_first_is_reached(n_classes):
    # Hand calculation: every item costs 1 for every class, so every rule's risk is m = 6
    # and no flip is made (change 0): all rules tie, and the tie-break returns rule 0 (the
    # constant class 0). Every later constant and every threshold rule is not reached.
    m = 6
    items = pd.DataFrame({"item_id": [f"i{k}" for k in range(m)], "f0": np.arange(m, dtype=float)})
    items["f1"], items["f2"] = items["f0"] % 2, items["f0"] % 3
    rule_class = build_rule_class("threshold", items, items["item_id"].to_numpy(), FEATURES, n_classes)
    shared = rule_class.linear_risks(np.ones((m, n_classes)))
    assert (shared == 6.0).all()
    none = np.zeros(0, dtype=np.int64)
    rows, bins = np.zeros((0, n_classes)), global_bins(rule_class, none)
    reached = [threshold_reaches(rule_class, shared, 1.0, rows, bins, t) for t in range(rule_class.size)]
    assert reached == [True] + [False] * (rule_class.size - 1)


@pytest.mark.parametrize("n_classes", [2, 3, 4])
@pytest.mark.parametrize("seed", range(10))
def test_risks_at_some_rules_are_the_full_pass_floats(seed, n_classes):
    matrix, rule_class = random_night(300 + seed, n_classes)
    rng = np.random.default_rng(seed)
    costs = rng.normal(size=(matrix.n_items, n_classes))
    subset = np.sort(rng.choice(matrix.n_items, max(1, matrix.n_items // 3), replace=False))
    for rows, items in [(costs, None), (costs[subset], subset)]:
        full = rule_class.linear_risks(rows, items)
        for count in (1, 3, rule_class.size):
            rules = np.sort(rng.choice(rule_class.size, min(count, rule_class.size), replace=False))
            rules[0] = 0 if count == rule_class.size else rules[0]  # a constant rule too
            assert rule_class.linear_risks_at(rows, items, rules).tobytes() == full[rules].tobytes()
