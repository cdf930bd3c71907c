"""Exact brute-force oracles in rational arithmetic, written independently of the core.

They enumerate every rule of a class as an explicit labelling, in the tie-break order
the contract and the core's docstrings document, and compute risks with Fractions.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field, replace
from fractions import Fraction

import numpy as np
import pandas as pd


@dataclass(frozen=True)
class Instance:
    """A small labelled batch: ``labels[s]`` maps item index to a class ``0 .. n_classes - 1``;
    ``listed`` rules give one class per item (bools read as 0/1)."""

    n_items: int
    labels: dict[str, dict[int, int]]
    source_weights: dict[str, int]
    item_weights: tuple[int, ...]
    features: dict[str, tuple[float, ...]] = field(default_factory=dict)
    listed: dict[str, tuple[int, ...]] = field(default_factory=dict)
    n_classes: int = 2

    @property
    def sources(self) -> list[str]:
        return sorted(self.labels)

    def item_id(self, j: int) -> str:
        return f"lot-{j:03d}"

    def frames(self) -> tuple[pd.DataFrame, pd.DataFrame]:
        rows = [
            {"item_id": self.item_id(j), "source_id": s, "label": y}
            for s, labelled in self.labels.items()
            for j, y in labelled.items()
        ]
        items = {"item_id": [self.item_id(j) for j in range(self.n_items)], "item_weight": list(self.item_weights)}
        items.update({name: list(values) for name, values in self.features.items()})
        items.update({f"rule__{name}": list(values) for name, values in self.listed.items()})
        return pd.DataFrame(rows, columns=["item_id", "source_id", "label"]), pd.DataFrame(items)

    def with_report(self, source: str, report: dict[int, int]) -> Instance:
        return replace(self, labels={**self.labels, source: dict(report)})


def enumerate_rules(instance: Instance, kind: str, features: list[str]) -> list[tuple[dict, tuple[int, ...]]]:
    """Every rule as (JSON form, labelling), in the documented tie-break order.

    Constants 0 .. K-1; for thresholds, per feature, per cut increasing, every pair
    (above, below) with above != below in lexicographic order.
    """
    m, k = instance.n_items, instance.n_classes
    rules = [({"kind": "constant", "label": c}, (c,) * m) for c in range(k)]
    if kind == "constant":
        return rules
    if kind == "listed":
        return [
            ({"kind": "listed", "name": name}, tuple(int(v) for v in instance.listed[name]))
            for name in sorted(instance.listed)
        ]
    for name in features:
        values = sorted(set(instance.features[name]))
        for low, high in zip(values, values[1:]):
            cut = (low + high) / 2
            for above, below in itertools.permutations(range(k), 2):
                labelling = tuple(above if x > cut else below for x in instance.features[name])
                form = {"kind": "threshold", "feature": name, "cut": cut, "above": above, "below": below}
                rules.append((form, labelling))
    return rules


def normalised_weights(instance: Instance) -> dict[str, Fraction]:
    total = sum(instance.source_weights[s] for s in instance.sources)
    return {s: Fraction(instance.source_weights[s], total) for s in instance.sources}


def private_risk(instance: Instance, source: str, labelling, truth: dict[int, int] | None = None) -> Fraction:
    truth = instance.labels[source] if truth is None else truth
    denominator = sum(instance.item_weights[j] for j in truth)
    wrong = sum(instance.item_weights[j] for j, y in truth.items() if labelling[j] != y)
    return Fraction(wrong, denominator)


def global_risk(instance: Instance, labelling) -> Fraction:
    weights = normalised_weights(instance)
    return sum((weights[s] * private_risk(instance, s, labelling) for s in instance.sources), Fraction(0))


def erm(instance: Instance, kind: str, features: list[str]) -> tuple[dict, tuple[int, ...], Fraction]:
    """First rule of minimal exact global risk."""
    best = None
    for form, labelling in enumerate_rules(instance, kind, features):
        risk = global_risk(instance, labelling)
        if best is None or risk < best[2]:
            best = (form, labelling, risk)
    return best


def own_erm(instance: Instance, kind: str, features: list[str], source: str):
    best = None
    for form, labelling in enumerate_rules(instance, kind, features):
        risk = private_risk(instance, source, labelling)
        if best is None or risk < best[2]:
            best = (form, labelling, risk)
    return best


def all_reports(instance: Instance, source: str):
    items = sorted(instance.labels[source])
    for bits in itertools.product(range(instance.n_classes), repeat=len(items)):
        yield dict(zip(items, bits))


def exhaustive_erm_gain(instance: Instance, kind: str, features: list[str], source: str) -> Fraction:
    """How much ``source`` can lower its true private risk under ERM, over every report."""
    truthful = private_risk(instance, source, erm(instance, kind, features)[1])
    best = truthful
    for report in all_reports(instance, source):
        chosen = erm(instance.with_report(source, report), kind, features)[1]
        best = min(best, private_risk(instance, source, chosen))
    return truthful - best


def rng_instance(
    rng: np.random.Generator, n_sources: int, n_items: int, shared: bool, kind: str, n_classes: int = 2
) -> Instance:
    """A random small instance (used where Hypothesis would be too slow for exhaustive search)."""
    labels = {}
    for s in range(n_sources):
        if shared:
            covered = range(n_items)
        else:
            covered = sorted(rng.choice(n_items, size=int(rng.integers(1, n_items + 1)), replace=False).tolist())
        labels[f"src-{s}"] = {int(j): int(rng.integers(0, n_classes)) for j in covered}
    features = {}
    listed = {}
    if kind == "threshold":
        features = {f: tuple(float(v) for v in rng.integers(0, 4, n_items)) for f in ("moisture_pct", "falling_number_s")}
    if kind == "listed":
        listed = {f"r{k}": tuple(int(v) for v in rng.integers(0, n_classes, n_items)) for k in range(int(rng.integers(1, 5)))}
    return Instance(
        n_items=n_items,
        labels=labels,
        source_weights={f"src-{s}": int(rng.integers(1, 4)) for s in range(n_sources)},
        item_weights=tuple(int(v) for v in rng.integers(1, 3, n_items)),
        features=features,
        listed=listed,
        n_classes=n_classes,
    )


def without(instance: Instance, source: str) -> Instance:
    """The same batch with ``source`` staying away (its registry weight is kept)."""
    return replace(instance, labels={s: y for s, y in instance.labels.items() if s != source})


def dictator_scores(mechanism: str, registry: dict[str, int]) -> dict[str, Fraction]:
    """The fixed score of every registered source (probability ∝ score over those present).

    ``tuned_dictator``: ``v / (1 - v)`` with ``v`` the registry weight normalised over
    every *registered* source, present or not.
    """
    total = sum(registry.values())
    if mechanism == "random_dictator":
        return {s: Fraction(1) for s in registry}
    if mechanism == "weighted_dictator":
        return {s: Fraction(w) for s, w in registry.items()}
    if len(registry) == 1:
        return {s: Fraction(1) for s in registry}
    return {s: Fraction(w, total) / (1 - Fraction(w, total)) for s, w in registry.items()}


def dictator_lottery(instance: Instance, mechanism: str, kind: str, features: list[str], registry: dict[str, int]):
    """[(source, probability, own ERM labelling)] over the sources present, exactly."""
    scores = dictator_scores(mechanism, registry)
    present = instance.sources
    total = sum(scores[s] for s in present)
    return [(s, scores[s] / total, own_erm(instance, kind, features, s)[1]) for s in present]


def lottery_private_risk(instance: Instance, lottery, source: str, truth: dict[int, int]) -> Fraction:
    """Expected private risk of ``source`` (judged on its ``truth``) under a lottery."""
    return sum((p * private_risk(instance, source, labelling, truth) for _, p, labelling in lottery), Fraction(0))


def dictator_guarantee(instance: Instance, lottery) -> Fraction:
    """``1 + 2 max_i p_i (1 - w_i) / w_i`` with ``w`` normalised over the sources present."""
    if len(lottery) == 1:
        return Fraction(1)
    weights = normalised_weights(instance)
    return 1 + 2 * max(p * (1 - weights[s]) / weights[s] for s, p, _ in lottery)


def others_risk(instance: Instance, source: str, labelling) -> Fraction:
    """``G_{-i}(c)``: the other sources' weighted risk, weights normalised over all present."""
    weights = normalised_weights(instance)
    return sum((weights[s] * private_risk(instance, s, labelling) for s in instance.sources if s != source), Fraction(0))


def brute_force_pull(instance: Instance, kind: str, features: list[str], source: str) -> Fraction:
    """``G_{-i}(ERM with i) - G_{-i}(ERM without i)``, both fits found by enumeration."""
    with_source = erm(instance, kind, features)[1]
    without_source = erm(without(instance, source), kind, features)[1]
    return others_risk(instance, source, with_source) - others_risk(instance, source, without_source)
