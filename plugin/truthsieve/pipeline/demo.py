"""The built-in demo: a grain cooperative's member farms grade shared reference lots.

Everything here is invented and generated with a fixed seed. Fourteen nights of a few
hundred reference lots each; every grader marks each lot accept (1) or reject (0).
The cooperative's lab and most farms grade honestly with a little noise; from night 6
``farm-cedar`` grades as if the moisture limit were 1.5 points looser (one threshold
rule, exactly: the shape of a best-response report). It is the largest member (registry
weight 10 of 19.5, about half the grain delivered), so under plain ERM its bent grades
move the fitted moisture cut: its pull on the fit shows it. From night 8 ``farm-elm`` grades
carelessly (a quarter of its grades flipped at random); on night 10 ``farm-birch``
sends a broken file.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from truthsieve.pipeline.config import Config

FIRST_NIGHT = dt.date(2026, 11, 2)
NIGHTS = 14
LOTS_PER_NIGHT = 320
SEED = 20261102
FEATURES = ["moisture_pct", "test_weight_kg_hl", "protein_pct", "foreign_material_pct", "falling_number_s"]

# (source_id, registry weight, grading noise)
GRADERS = [
    ("coop-lab", 3.0, 0.01),
    ("farm-alder", 2.0, 0.02),
    ("farm-birch", 1.5, 0.02),
    ("farm-cedar", 10.0, 0.02),  # the largest member: about half the grain delivered
    ("farm-dunmore", 1.0, 0.02),
    ("farm-elm", 1.0, 0.02),
    ("farm-fenwick", 1.0, 0.02),
]
STRATEGIC, STRATEGIC_FROM, STRATEGIC_MOISTURE_LIMIT = "farm-cedar", 6, 15.5
CARELESS, CARELESS_FROM, CARELESS_FLIP = "farm-elm", 8, 0.25
BROKEN, BROKEN_NIGHT = "farm-birch", 10
MOISTURE_LIMIT = 14.0  # a common rule of thumb for safe storage of wheat (from memory; not a standard)


def night_dates() -> list[str]:
    return [(FIRST_NIGHT + dt.timedelta(days=k)).isoformat() for k in range(NIGHTS)]


def demo_config_dict() -> dict:
    return {
        "rule_class": {"kind": "threshold", "features": FEATURES},
        "mechanism": "tuned_dictator",
        "sources": [
            {"source_id": s, "weight": w, "owner": f"grading@{s}.example"} for s, w, _ in GRADERS
        ],
        "routing": {"mode": "strategy_proof", "min_valid_sources": 1},
        "alerts": {"platform_address": "intake-platform@coop.example"},
    }


def demo_config() -> Config:
    return Config.model_validate(demo_config_dict())


def reference_lots(rng: np.random.Generator, n: int) -> dict[str, np.ndarray]:
    """Lab measurements of ``n`` reference lots, in plausible ranges (invented)."""
    return {
        "moisture_pct": np.round(np.clip(rng.normal(14.2, 1.9, n), 10, 20), 1),
        "test_weight_kg_hl": np.round(np.clip(rng.normal(77, 3.5, n), 68, 84), 1),
        "protein_pct": np.round(np.clip(rng.normal(12, 1.3, n), 9, 15), 1),
        "foreign_material_pct": np.round(np.clip(rng.exponential(0.9, n), 0, 4), 2),
        "falling_number_s": np.round(np.clip(rng.normal(330, 55, n), 150, 450)),
    }


def sound(lots: dict[str, np.ndarray], moisture_limit: float) -> np.ndarray:
    """The grade an honest grader intends: dry enough, sound, clean enough."""
    return (
        (lots["moisture_pct"] <= moisture_limit)
        & (lots["falling_number_s"] >= 200)
        & (lots["foreign_material_pct"] <= 3.0)
    ).astype(np.int8)


def grades(rng: np.random.Generator, lots: dict[str, np.ndarray], source: str, noise: float, night: int) -> np.ndarray:
    if source == STRATEGIC and night >= STRATEGIC_FROM:
        return (lots["moisture_pct"] <= STRATEGIC_MOISTURE_LIMIT).astype(np.int8)
    intended = sound(lots, MOISTURE_LIMIT)
    flip = CARELESS_FLIP if source == CARELESS and night >= CARELESS_FROM else noise
    return np.where(rng.random(len(intended)) < flip, 1 - intended, intended).astype(np.int8)


def generate_inbox(inbox: str | Path, seed: int = SEED) -> list[str]:
    """Write the 14 nights' inbox under ``inbox``; returns the batch dates."""
    inbox = Path(inbox)
    rng = np.random.default_rng(seed)
    dates = night_dates()
    for night, date in enumerate(dates, start=1):
        folder = inbox / f"batch_date={date}"
        folder.mkdir(parents=True, exist_ok=True)
        lots = reference_lots(rng, LOTS_PER_NIGHT)
        ids = [f"lot-{date}-{k:04d}" for k in range(LOTS_PER_NIGHT)]
        pq.write_table(pa.table({"item_id": ids, **lots}), folder / "items.parquet")
        for source, _, noise in GRADERS:
            labels = grades(rng, lots, source, noise, night)
            target = folder / f"source_id={source}"
            target.mkdir(exist_ok=True)
            if source == BROKEN and night == BROKEN_NIGHT:
                broken = labels.astype(np.int64)
                broken[17] = 2  # a grade outside {0, 1}
                table = pa.table({"item_id": ids[:40] + [ids[3]], "label": np.append(broken[:40], 1)})
                pq.write_table(table, target / "grades.parquet")
            else:
                order = rng.permutation(LOTS_PER_NIGHT)  # graders return lots in any order
                pq.write_table(
                    pa.table({"item_id": [ids[k] for k in order], "label": pa.array(labels[order].astype(bool))}),
                    target / "grades.parquet",
                )
    return dates


REVIEWER = "Greta Voss (quality manager)"  # invented, like everything in the demo


def record_demo_verdicts(out: str | Path, at: str) -> list[str]:
    """The quality manager's two verdicts: she approves the first night awaiting review
    whose drawn rule is not the strategic member's, and rejects the last night awaiting
    review (the strategic member's drawn rule if there is one). Returns what was done;
    nights she already decided are left alone, so reruns add nothing."""
    import json

    from truthsieve.pipeline.ledger import AWAITING, nights, read_ledger
    from truthsieve.pipeline.verdicts import record_verdict

    state = nights(read_ledger(out))
    if any(n.decided_by and n.decided_by.get("by") == REVIEWER for n in state.values()):
        return [f"{n.date}: {n.status} by {REVIEWER}" for n in state.values() if n.decided_by and n.decided_by.get("by") == REVIEWER]
    awaiting = [n for n in state.values() if n.status == AWAITING and n.rule is not None]
    if len(awaiting) < 2:
        return [f"only {len(awaiting)} night(s) await review: no demo verdicts recorded"]

    def decision(night) -> dict:
        return json.loads((Path(out) / f"batch_date={night.date}" / "decision.json").read_text())

    def drawn_source(night) -> str | None:
        return decision(night)["draw"]["source_id"]

    strategic = [n for n in awaiting if drawn_source(n) == STRATEGIC]
    rejected = strategic[-1] if strategic else awaiting[-1]
    approved = next(n for n in awaiting if n is not rejected and drawn_source(n) != STRATEGIC)
    record_verdict(out, approved.date, True, REVIEWER, "lab re-check agrees with the drawn rule", at)
    codes = sorted({r["code"] for r in decision(rejected)["reasons"] if r["blocking"]})
    why = f"the drawn rule is {STRATEGIC}'s own" if strategic else f"not convinced ({', '.join(codes)})"
    record_verdict(out, rejected.date, False, REVIEWER, why, at)
    return [f"{approved.date}: approved by {REVIEWER}", f"{rejected.date}: rejected by {REVIEWER} ({why})"]
