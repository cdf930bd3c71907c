"""The built-in demo: a grain cooperative's member farms grade shared reference lots.

Everything here is invented and generated with a fixed seed. Fourteen nights of a few
hundred reference lots each; every grader marks each lot accept (1) or reject (0).

* The cooperative's lab and most farms grade honestly with a little noise, to a moisture
  limit of 14 %.
* ``farm-cedar`` is the largest member (registry weight 8 of 17.5: heavy, but short of a
  weighted majority, so its honest grades do not dictate the ERM fit). Its crop comes in
  damp and its graders honestly accept lots up to 14.5 %; its neighbour ``farm-dunmore``
  (weight 1) honestly grades the same way: an ally without any plan. Under plain ERM
  cedar could gain by exaggerating (its gain bracket is positive on honest nights); from
  night 6 it does: it grades as if the limit were 15.5 % (one threshold rule, exactly),
  and with its ally's weight the ERM fit moves to its side. Its pull on the fit shows it.
* From night 8 ``farm-elm`` grades carelessly (a quarter of its grades flipped at random).
* On night 10 ``farm-birch`` sends a broken file (quarantined).
* On night 4 ``farm-fenwick`` delivers nothing (no folder: absent); after the 14 nights
  are screened the demo delivers its late file for night 4 and screens the night again:
  a changed re-screen of a published night (``draw_revised``), so it goes to review.
* On night 14 a storm cuts four farms off: three of the seven members deliver, below
  the demo's ``routing.min_valid_sources: 4`` (a majority of the seven registered
  members), so the night goes to review (``too_few_sources``).

The demo's quality manager approves the late delivery and rejects the storm night.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from truthsieve.pipeline.config import Config
from truthsieve.pipeline.layout import batch_dir, source_name

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
    ("farm-cedar", 8.0, 0.02),  # the largest member, short of a weighted majority (8 of 17.5)
    ("farm-dunmore", 1.0, 0.02),
    ("farm-elm", 1.0, 0.02),
    ("farm-fenwick", 1.0, 0.02),
]
STRATEGIC, STRATEGIC_FROM, STRATEGIC_MOISTURE_LIMIT = "farm-cedar", 6, 15.5
DAMP, DAMP_MOISTURE_LIMIT = ("farm-cedar", "farm-dunmore"), 14.5  # honest, damp crop: cedar and its ally
ABSENT, ABSENT_NIGHT = "farm-fenwick", 4  # no folder that night; its file arrives late
LATE_FILE = "late-grades.parquet"
STORM_NIGHT, STORM_DELIVERED = 14, ("coop-lab", "farm-alder", "farm-fenwick")
MIN_VALID_SOURCES = 4  # a majority of the seven registered members
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
        "routing": {"mode": "strategy_proof", "min_valid_sources": MIN_VALID_SOURCES},
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
    intended = sound(lots, DAMP_MOISTURE_LIMIT if source in DAMP else MOISTURE_LIMIT)
    flip = CARELESS_FLIP if source == CARELESS and night >= CARELESS_FROM else noise
    return np.where(rng.random(len(intended)) < flip, 1 - intended, intended).astype(np.int8)


def _label_table(ids: list[str], labels: np.ndarray, order: np.ndarray) -> pa.Table:
    return pa.table({"item_id": [ids[k] for k in order], "label": pa.array(labels[order].astype(bool))})


def _nights(seed: int):
    """Every night's (night, date, items table, {source: label table}) in order, from one
    generator; the absent member's table is made (for its late delivery) but marked."""
    rng = np.random.default_rng(seed)
    for night, date in enumerate(night_dates(), start=1):
        lots = reference_lots(rng, LOTS_PER_NIGHT)
        ids = [f"lot-{date}-{k:04d}" for k in range(LOTS_PER_NIGHT)]
        tables = {}
        for source, _, noise in GRADERS:
            labels = grades(rng, lots, source, noise, night)
            if source == BROKEN and night == BROKEN_NIGHT:
                broken = labels.astype(np.int64)
                broken[17] = 2  # a grade outside {0, 1}
                tables[source] = pa.table({"item_id": ids[:40] + [ids[3]], "label": np.append(broken[:40], 1)})
            else:
                tables[source] = _label_table(ids, labels, rng.permutation(LOTS_PER_NIGHT))  # any order
        yield night, date, pa.table({"item_id": ids, **lots}), tables


def delivered(source: str, night: int) -> bool:
    """Whether ``source`` delivers on ``night`` in time (the absent member and the storm)."""
    if (source, night) == (ABSENT, ABSENT_NIGHT):
        return False
    return night != STORM_NIGHT or source in STORM_DELIVERED


def generate_inbox(inbox: str | Path, seed: int = SEED) -> list[str]:
    """Write the 14 nights' inbox under ``inbox``; returns the batch dates. The absent
    member's file for its night is not written (see :func:`deliver_late`)."""
    inbox = Path(inbox)
    for night, date, items, tables in _nights(seed):
        folder = batch_dir(inbox, date)
        folder.mkdir(parents=True, exist_ok=True)
        pq.write_table(items, folder / "items.parquet")
        for source, table in tables.items():
            if delivered(source, night):
                (folder / source_name(source)).mkdir(exist_ok=True)
                pq.write_table(table, folder / source_name(source) / "grades.parquet")
    return night_dates()


def batch_present(inbox: str | Path, date: str) -> bool:
    return batch_dir(Path(inbox), date).is_dir()


def deliver_late(inbox: str | Path, seed: int = SEED) -> Path | None:
    """The demo acting as the absent member: its late file for its night, into the inbox.
    Returns the file written, or None if it was delivered already."""
    date = night_dates()[ABSENT_NIGHT - 1]
    target = batch_dir(Path(inbox), date) / source_name(ABSENT) / LATE_FILE
    if target.exists():
        return None
    table = next(t for night, _, _, t in _nights(seed) if night == ABSENT_NIGHT)[ABSENT]
    target.parent.mkdir(exist_ok=True)
    pq.write_table(table, target)
    return target


REVIEWER = "Greta Voss (quality manager)"  # invented, like everything in the demo


APPROVE_NOTE = "the late file came through a courier delay; its grades look like the other members'; the new draw may stand"
REJECT_NOTE = "three of seven members do not speak for the cooperative; the rule in force stays"


def record_demo_verdicts(out: str | Path, at: str) -> list[str]:
    """The quality manager's two verdicts: she approves the night re-screened for a late
    file (``draw_revised``) and rejects the night too few members delivered
    (``too_few_sources``). Returns what was done; nights she already decided are left
    alone, so reruns add nothing."""
    import json

    from truthsieve.pipeline.ledger import AWAITING, nights, read_ledger
    from truthsieve.pipeline.verdicts import record_verdict

    state = nights(read_ledger(out))
    done = [n for n in state.values() if n.decided_by and n.decided_by.get("by") == REVIEWER]
    if done:
        return [f"{n.date}: {n.status} by {REVIEWER}" for n in done]

    def blocking(night) -> set[str]:
        decision = json.loads((batch_dir(Path(out), night.date) / "decision.json").read_text())
        return {r["code"] for r in decision["reasons"] if r["blocking"]}

    awaiting = [n for n in state.values() if n.status == AWAITING]
    late = [n for n in awaiting if "draw_revised" in blocking(n) and n.rule is not None]
    storm = [n for n in awaiting if "too_few_sources" in blocking(n)]
    if not late or not storm:
        return [f"{len(late)} re-screened and {len(storm)} under-delivered night(s) await review: no demo verdicts recorded"]
    record_verdict(out, late[0].date, True, REVIEWER, APPROVE_NOTE, at)
    record_verdict(out, storm[-1].date, False, REVIEWER, REJECT_NOTE, at)
    return [f"{late[0].date}: approved by {REVIEWER} ({APPROVE_NOTE})", f"{storm[-1].date}: rejected by {REVIEWER} ({REJECT_NOTE})"]


#: ``truthsieve demo --scenario NAME``: the module of each scenario and its default output root.
SCENARIOS = {"grain": "truthsieve.pipeline.demo", "grades": "truthsieve.pipeline.demo_grades"}
DEFAULT_OUT = {"grain": Path("out/demo"), "grades": Path("out/grades")}


def scenario(name: str):
    """The module of a demo scenario: ``night_dates()``, ``generate_inbox(inbox)``, ``demo_config()``.
    Only ``grain`` (this module) has verdict nights and a late delivery."""
    import importlib

    return importlib.import_module(SCENARIOS[name])
