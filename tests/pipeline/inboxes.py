"""Write small real inboxes (Parquet through pyarrow) for the pipeline tests."""

from __future__ import annotations

import hashlib
import subprocess
import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import yaml

SOURCES = ["lab", "north", "south", "east"]


def write_config(path: Path, **overrides) -> Path:
    config = {
        "rule_class": {"kind": "threshold", "features": ["moisture_pct", "falling_number_s"]},
        "mechanism": "tuned_dictator",
        "sources": [{"source_id": s, "weight": 2.0 if s == "lab" else 1.0, "owner": f"{s}@example.org"} for s in SOURCES],
        "alerts": {"platform_address": "platform@example.org"},
    }
    config.update(overrides)
    path.write_text(yaml.safe_dump(config))
    return path


def write_batch(inbox: Path, date: str, seed: int = 0, n_items: int = 120, bend: dict | None = None, noise: float = 0.02) -> Path:
    """Honest sources label ``moisture <= 14`` with a little noise; ``bend`` maps a source
    to the moisture limit it grades by instead (exactly, no noise)."""
    rng = np.random.default_rng(seed)
    folder = inbox / f"batch_date={date}"
    folder.mkdir(parents=True, exist_ok=True)
    moisture = np.round(rng.uniform(10, 18, n_items), 1)
    falling = np.round(rng.uniform(150, 450, n_items))
    ids = [f"lot-{k:05d}" for k in range(n_items)]
    pq.write_table(pa.table({"item_id": ids, "moisture_pct": moisture, "falling_number_s": falling}), folder / "items.parquet")
    for source in SOURCES:
        limit = (bend or {}).get(source)
        if limit is not None:
            labels = (moisture <= limit).astype(np.int8)
        else:
            truth = (moisture <= 14.0).astype(np.int8)
            labels = np.where(rng.random(n_items) < noise, 1 - truth, truth).astype(np.int8)
        write_labels(folder, source, ids, labels)
    return folder


def write_labels(folder: Path, source: str, ids, labels, name: str = "labels.parquet") -> Path:
    target = folder / f"source_id={source}"
    target.mkdir(parents=True, exist_ok=True)
    path = target / name
    pq.write_table(pa.table({"item_id": list(ids), "label": pa.array(np.asarray(labels, dtype=bool))}), path)
    return path


def checksums(root: Path) -> dict[str, str]:
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(root.rglob("*")) if p.is_file()}


def cli(*args: str, env: dict | None = None, **kwargs) -> subprocess.CompletedProcess:
    """Run the real command line in a child process."""
    return subprocess.run(
        [sys.executable, "-m", "truthsieve.pipeline.cli", *args], capture_output=True, text=True, env=env, **kwargs
    )

