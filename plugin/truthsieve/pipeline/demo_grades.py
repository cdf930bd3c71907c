"""The grades demo: the grain cooperative sorts reference lots into four classes.

Everything here is invented and generated from an explicit seed; nothing is data about a
real organisation, and the class limits are the demo's own (not a grading standard).

Story. After harvest the cooperative pools its stored grain for sale in four classes,
priced apart: ``reject`` (too damp to keep), ``feed``, ``milling`` and ``premium``. Before
the winter sales it fits a *pooling rule* from its members' gradings of shared reference
lots, one batch a night for seven nights. The demo's invented ground truth:

* ``reject`` when moisture is above 16.0 %;
* otherwise ``feed`` when test weight is below 75.0 kg/hl (the feed/milling boundary),
  ``milling`` below 80.0 kg/hl, and ``premium`` from 80.0 kg/hl.

Graders. The lab and the members grade honestly, each with its own slip rate: a slipped
grade is one class off the truth (up or down with equal chance; only up from ``reject``,
only down from ``premium``). ``farm-alder``'s crop came in light this year, so many of its
own lots sit just below the feed/milling boundary, where a milling price is worth having.
From night ``STRATEGIC_FROM`` it grades with care but inflates: a lot whose true grade is
``feed`` and whose test weight lies in ``[75.0 - BAND, 75.0)`` it calls ``milling``; every
other lot it grades exactly right (the shape of a best response: a shifted boundary, not
noise). Before that night it grades honestly with its slip rate.

Encodings, as members really send them: the lab writes class names (dictionary encoded),
``farm-birch`` and ``farm-elm`` class names as plain strings, the others class indices
(int8 or int64). On night ``TYPO_NIGHT`` ``farm-elm``'s file carries a misspelt class name
(``premiun``), so quarantine shows an ``unknown_class_name`` record naming file, row and column.

Wiring (``truthsieve demo --scenario grades``): this module offers the names
:mod:`truthsieve.pipeline.demo` offers (``night_dates``, ``demo_config``, ``generate_inbox``).
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from truthsieve.pipeline.config import Config
from truthsieve.pipeline.demo import FEATURES, reference_lots

CLASSES = ("reject", "feed", "milling", "premium")
REJECT, FEED, MILLING, PREMIUM = range(4)
FIRST_NIGHT = dt.date(2026, 12, 7)
NIGHTS = 7
LOTS_PER_NIGHT = 240
SEED = 20261207
REJECT_MOISTURE = 16.0  # % wet basis; above it the lot is too damp to keep (the demo's own limit)
MILLING_TEST_WEIGHT = 75.0  # kg/hl: feed below, milling from here (the boundary the strategic member bends)
PREMIUM_TEST_WEIGHT = 80.0  # kg/hl: premium from here

# (source_id, registry weight, slip rate: the chance that an honest grade is one class off)
GRADERS = [
    ("coop-lab", 3.0, 0.01),
    ("farm-alder", 3.0, 0.03),
    ("farm-birch", 1.5, 0.03),
    ("farm-cedar", 2.0, 0.03),
    ("farm-dunmore", 1.0, 0.03),
    ("farm-elm", 1.0, 0.05),
]
STRATEGIC, STRATEGIC_FROM, BAND = "farm-alder", 3, 1.5  # from night 3: feed lots within 1.5 kg/hl below 75.0 called milling
NAMES_DICTIONARY, NAMES_PLAIN = ("coop-lab",), ("farm-birch", "farm-elm")
INDICES_INT8 = ("farm-alder", "farm-dunmore")  # farm-cedar writes int64 indices
TYPO, TYPO_NIGHT, TYPO_ROW = "farm-elm", 5, 12  # row 12 (counting from 1) holds "premiun"


def night_dates() -> list[str]:
    return [(FIRST_NIGHT + dt.timedelta(days=k)).isoformat() for k in range(NIGHTS)]


def demo_config_dict() -> dict:
    return {
        "rule_class": {"kind": "threshold", "features": ["moisture_pct", "test_weight_kg_hl"]},
        "mechanism": "tuned_dictator",
        "classes": list(CLASSES),
        "sources": [{"source_id": s, "weight": w, "owner": f"grading@{s}.example"} for s, w, _ in GRADERS],
        "routing": {"mode": "strategy_proof"},
        "alerts": {"platform_address": "pooling-platform@coop.example"},
    }


def demo_config() -> Config:
    return Config.model_validate(demo_config_dict())


def true_grades(lots: dict[str, np.ndarray]) -> np.ndarray:
    """The demo's invented ground truth: class indices 0..3."""
    weight = lots["test_weight_kg_hl"]
    grades = np.where(weight < MILLING_TEST_WEIGHT, FEED, np.where(weight < PREMIUM_TEST_WEIGHT, MILLING, PREMIUM))
    return np.where(lots["moisture_pct"] > REJECT_MOISTURE, REJECT, grades).astype(np.int8)


def inflated(lots: dict[str, np.ndarray], truth: np.ndarray) -> np.ndarray:
    """True for the lots the strategic member calls milling instead of feed."""
    weight = lots["test_weight_kg_hl"]
    return (truth == FEED) & (weight >= MILLING_TEST_WEIGHT - BAND) & (weight < MILLING_TEST_WEIGHT)


def slipped(rng: np.random.Generator, truth: np.ndarray, rate: float) -> np.ndarray:
    """Honest grades: each is one class off the truth with probability ``rate``."""
    slip = rng.random(len(truth)) < rate
    up = rng.random(len(truth)) < 0.5
    step = np.where(truth == REJECT, 1, np.where(truth == PREMIUM, -1, np.where(up, 1, -1)))
    return np.where(slip, truth + step, truth).astype(np.int8)


def grades(rng: np.random.Generator, lots: dict[str, np.ndarray], truth: np.ndarray, source: str, rate: float, night: int) -> np.ndarray:
    honest = slipped(rng, truth, rate)  # drawn for every source every night, so the stream does not depend on strategy
    if source == STRATEGIC and night >= STRATEGIC_FROM:
        return np.where(inflated(lots, truth), MILLING, truth).astype(np.int8)
    return honest


def label_column(source: str, labels: np.ndarray) -> pa.Array:
    """The label column in the encoding this source sends."""
    if source in NAMES_DICTIONARY:
        return pa.DictionaryArray.from_arrays(pa.array(labels.astype(np.int32)), pa.array(list(CLASSES)))
    if source in NAMES_PLAIN:
        return pa.array([CLASSES[k] for k in labels], pa.string())
    return pa.array(labels, pa.int8() if source in INDICES_INT8 else pa.int64())


def nights(seed: int = SEED):
    """Every night's (night, date, lots, truth, {source: class indices in item order}), from one generator."""
    rng = np.random.default_rng(seed)
    for night, date in enumerate(night_dates(), start=1):
        lots = reference_lots(rng, LOTS_PER_NIGHT)
        truth = true_grades(lots)
        labels = {source: grades(rng, lots, truth, source, rate, night) for source, _, rate in GRADERS}
        yield night, date, lots, truth, labels


def generate_inbox(inbox: str | Path, seed: int = SEED) -> list[str]:
    """Write the seven nights' inbox under ``inbox`` (label files in a shuffled row order); returns the batch dates."""
    inbox = Path(inbox)
    order_rng = np.random.default_rng([seed, 1])  # a second stream: row order never moves the grades
    for night, date, lots, _, labels in nights(seed):
        folder = inbox / f"batch_date={date}"
        folder.mkdir(parents=True, exist_ok=True)
        ids = np.array([f"lot-{date}-{k:04d}" for k in range(LOTS_PER_NIGHT)])
        pq.write_table(pa.table({"item_id": ids, **lots}), folder / "items.parquet")
        for source, _, _ in GRADERS:
            order = order_rng.permutation(LOTS_PER_NIGHT)
            column = label_column(source, labels[source][order])
            if (source, night) == (TYPO, TYPO_NIGHT):
                names = column.to_pylist()
                names[TYPO_ROW - 1] = "premiun"
                column = pa.array(names, pa.string())
            (folder / f"source_id={source}").mkdir(exist_ok=True)
            pq.write_table(pa.table({"item_id": ids[order], "label": column}), folder / f"source_id={source}" / "grades.parquet")
    return night_dates()
