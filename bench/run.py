"""Benchmarks of one nightly screen: prints ratios and writes them as JSON.

    python bench/run.py            # 100k and 1M labels, the listed case
    python bench/run.py --large    # adds 10M labels (several minutes, a few GiB)

Each size runs in a child process so peak resident memory is its own. Figures are
medians over --repeat runs. Synthetic data only (fixed seeds).
"""

from __future__ import annotations

import argparse
import json
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

ROOT = Path(__file__).resolve().parents[1]
N_SOURCES, N_FEATURES = 10, 8


def make_inbox(folder: Path, n_items: int, listed_rules: int = 0, seed: int = 0) -> dict:
    rng = np.random.default_rng(seed)
    batch = folder / "batch_date=2026-01-01"
    batch.mkdir(parents=True, exist_ok=True)
    features = {f"f{k}": np.round(rng.normal(0, 1, n_items), 3) for k in range(N_FEATURES)}
    ids = [f"i{k:08d}" for k in range(n_items)]
    columns = {"item_id": ids, **features}
    for r in range(listed_rules):
        columns[f"rule__r{r:03d}"] = features["f0"] > rng.normal(0, 1)
    pq.write_table(pa.table(columns), batch / "items.parquet")
    truth = features["f0"] + 0.3 * features["f1"] > 0
    for s in range(N_SOURCES):
        labels = truth ^ (rng.random(n_items) < 0.05 + 0.02 * s)
        if s == 0:
            labels = features["f0"] > 0.4  # one rule-shaped source
        (batch / f"source_id=s{s:02d}").mkdir(exist_ok=True)
        pq.write_table(pa.table({"item_id": ids, "label": labels}), batch / f"source_id=s{s:02d}" / "labels.parquet")
    kind = "listed" if listed_rules else "threshold"
    return {
        "rule_class": {"kind": kind, "features": [] if listed_rules else list(features)},
        "mechanism": "tuned_dictator",
        "sources": [{"source_id": f"s{s:02d}", "weight": 1.0 + s % 3} for s in range(N_SOURCES)],
    }


def measure(n_items: int, listed_rules: int, repeat: int) -> dict:
    """Runs inside the child process."""

    from truthsieve.core.dawid_skene import dawid_skene
    from truthsieve.core.incentives import source_incentive
    from truthsieve.core.mechanisms import run_mechanism
    from truthsieve.pipeline.analysis import prepare
    from truthsieve.pipeline.config import Config
    from truthsieve.pipeline.outputs import publish
    from truthsieve.pipeline.screen import decide, ingest_batch

    with tempfile.TemporaryDirectory() as tmp:
        inbox = Path(tmp)
        config = Config.model_validate(make_inbox(inbox, n_items, listed_rules))
        times: dict[str, list[float]] = {}

        def timed(name, call):
            start = time.perf_counter()
            value = call()
            times.setdefault(name, []).append(time.perf_counter() - start)
            return value

        for _ in range(repeat):
            batch = inbox / "batch_date=2026-01-01"

            def bare_load():
                """The floor: every file read and every column turned into a NumPy array."""
                tables = [pq.read_table(batch / "items.parquet"), *(pq.read_table(p) for p in sorted(batch.glob("source_id=*/*.parquet")))]
                return [[column.to_numpy(zero_copy_only=False) for column in table.columns] for table in tables]

            timed("bare_load", bare_load)
            intake = timed("load_validate", lambda: ingest_batch(inbox, "2026-01-01", config))
            matrix, rule_class, consensus = timed("consensus_fit", lambda: prepare(intake.labels, intake.items.table, config))
            timed("mechanism", lambda: run_mechanism(config.mechanism, matrix, rule_class, consensus))
            results = timed("incentives", lambda: [source_incentive(matrix, rule_class, consensus, i, config.analysis.incentive_budget) for i in range(matrix.n_sources)])
            timed("reliability", lambda: dawid_skene(matrix.labels, matrix.labelled))
            decision, files, _ = decide(intake, config, {}, results)
            timed("write_outputs", lambda: publish(inbox / "out", "2026-01-01", files))
            timed("full_screen", lambda: publish(inbox / "out", "2026-01-01", decide(ingest_batch(inbox, "2026-01-01", config), config, {})[1]))
            if rule_class.kind == "threshold":
                from sklearn.tree import DecisionTreeClassifier

                cost0, cost1 = matrix.global_costs()
                features = np.column_stack([f.values for f in rule_class.features])
                y = (cost0 > cost1).astype(int)
                weight = np.abs(cost0 - cost1)
                timed("threshold_erm", lambda: rule_class.fit(cost0, cost1))
                timed("sklearn_stump", lambda: DecisionTreeClassifier(max_depth=1).fit(features, y, sample_weight=weight))
    medians = {k: statistics.median(v) for k, v in times.items()}
    exact = [r.gain_exact for r in results]
    widths = [r.gain_upper - r.gain_lower for r in results]
    return {
        "labels": n_items * N_SOURCES,
        "seconds": medians,
        "exact_gain_fraction": sum(exact) / len(exact),
        "median_bracket_width": statistics.median(widths),
        "peak_rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    }


def measure_apply(n_items: int, repeat: int) -> dict:
    """Runs inside the child process: ``apply`` of a threshold rule to ``n_items`` new items
    against the floor of reading the columns it needs and writing item_id and label."""
    import json as json_module

    from truthsieve.pipeline.apply import apply_rule
    from truthsieve.pipeline.outputs import batch_output
    from truthsieve.pipeline.verdicts import record_publication

    rng = np.random.default_rng(1)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        items = folder / "items.parquet"
        columns = {f"f{k}": np.round(rng.normal(0, 1, n_items), 3) for k in range(N_FEATURES)}
        pq.write_table(pa.table({"item_id": [f"i{k:08d}" for k in range(n_items)], **columns}), items)
        decision = json_module.dumps({"route": "aggregate", "draw": {"rule": {"kind": "threshold", "feature": "f0", "cut": 0.1, "above": 1}}}).encode()
        batch_output(folder / "out", "2026-01-01").mkdir(parents=True)
        (batch_output(folder / "out", "2026-01-01") / "decision.json").write_bytes(decision)
        record_publication(folder / "out", "2026-01-01", decision)
        times: dict[str, list[float]] = {}
        for _ in range(repeat):
            start = time.perf_counter()
            table = pq.read_table(items, columns=["item_id", "f0"])
            labels = pa.array((table.column("f0").to_numpy() > 0.1).astype(np.int16))
            pq.write_table(pa.table({"item_id": table.column("item_id"), "label": labels}), folder / "floor.parquet")
            times.setdefault("parquet_floor", []).append(time.perf_counter() - start)
            start = time.perf_counter()
            apply_rule(folder / "out", items, folder / "applied.parquet")
            times.setdefault("apply", []).append(time.perf_counter() - start)
    return {"items": n_items, "seconds": {k: statistics.median(v) for k, v in times.items()}}


def make_many_sources_inbox(folder: Path, n_sources: int, n_items: int, seed: int = 7) -> dict:
    """``n_sources`` sources each labelling every one of ``n_items`` items (one night)."""
    rng = np.random.default_rng(seed)
    batch = folder / "batch_date=2026-01-01"
    batch.mkdir(parents=True, exist_ok=True)
    f0, f1 = np.round(rng.normal(0, 1, n_items), 3), np.round(rng.normal(0, 1, n_items), 3)
    ids = pa.array([f"i{k:08d}" for k in range(n_items)])
    pq.write_table(pa.table({"item_id": ids, "f0": f0, "f1": f1}), batch / "items.parquet")
    truth = f0 + 0.3 * f1 > 0
    for s in range(n_sources):
        labels = truth ^ (rng.random(n_items) < 0.02 + 0.1 * (s % 5) / 5)
        (batch / f"source_id=s{s:04d}").mkdir()
        pq.write_table(pa.table({"item_id": ids, "label": labels}), batch / f"source_id=s{s:04d}" / "labels.parquet")
    return {
        "rule_class": {"kind": "threshold", "features": ["f0", "f1"]},
        "mechanism": "tuned_dictator",
        "sources": [{"source_id": f"s{s:04d}", "weight": 1.0 + s % 3} for s in range(n_sources)],
    }


def measure_many_sources(n_sources: int, n_items: int, sample: int) -> dict:
    """Runs inside the child process: one night through the DAG's own operators, called in
    process (``run``), as each mapped task would on a worker. Every validate_source task is
    timed; ``sample`` source_incentive tasks (evenly spread) are timed and their median
    stands for the rest. The whole night is the sum of its tasks; the CLI's one-process
    screen of the same night is timed beside it."""
    import yaml

    from truthsieve.airflow.operators import CheckItemsOperator, FitConsensusOperator, SourceIncentiveOperator, ValidateSourceOperator
    from truthsieve.pipeline.config import Config
    from truthsieve.pipeline.outputs import publish
    from truthsieve.pipeline.screen import decide, ingest_batch

    with tempfile.TemporaryDirectory() as tmp:
        inbox, out = Path(tmp) / "inbox", Path(tmp) / "out"
        raw = make_many_sources_inbox(inbox, n_sources, n_items)
        (Path(tmp) / "config.yaml").write_text(yaml.safe_dump(raw))
        paths = {"inbox": str(inbox), "batch_date": "2026-01-01", "config_path": str(Path(tmp) / "config.yaml"), "out": str(out)}

        def timed(call):
            start = time.perf_counter()
            call()
            return time.perf_counter() - start

        check = timed(lambda: CheckItemsOperator(task_id="check_items", **paths).run({}))
        validate = [timed(lambda s=s: ValidateSourceOperator(task_id="v", source_folder=f"source_id=s{s:04d}", **paths).run({})) for s in range(n_sources)]
        fit = timed(lambda: FitConsensusOperator(task_id="fit_consensus", **paths).run({}))
        picks = np.linspace(0, n_sources - 1, sample).round().astype(int)
        incentive = [timed(lambda s=s: SourceIncentiveOperator(task_id="i", source_id=f"s{s:04d}", **paths).run({})) for s in picks]
        config = Config.model_validate(raw)
        cli_screen = timed(lambda: publish(out / "cli", "2026-01-01", decide(ingest_batch(inbox, "2026-01-01", config), config, {})[1]))
    per_source = statistics.median(validate) + statistics.median(incentive)
    night = check + sum(validate) + fit + n_sources * statistics.median(incentive)
    return {
        "sources": n_sources,
        "labels": n_sources * n_items,
        "seconds": {
            "check_items": check,
            "validate_source_median": statistics.median(validate),
            "fit_consensus": fit,
            "source_incentive_median": statistics.median(incentive),
            "per_source_steps": per_source,
            "night_of_tasks": night,
            "cli_screen": cli_screen,
        },
        "per_source_over_night": per_source / night,
        "incentive_sample": int(sample),
    }


def many_sources_row(repeat: int, n_sources: int = 1000, n_items: int = 1000) -> dict:
    """The many-sources row (1,000 sources x 1,000 items = 1M labels) in its own child."""
    sample = max(3, repeat)
    out = subprocess.run([sys.executable, __file__, "--many-sources-child", str(n_sources), str(n_items), str(sample)], capture_output=True, text=True, check=True)
    row = json.loads(out.stdout.strip().splitlines()[-1])
    s = row["seconds"]
    print(f"{'many' + str(n_sources):>10}: per source {s['per_source_steps']:.2f}s (validate {s['validate_source_median']:.3f}s, "
          f"incentive {s['source_incentive_median']:.2f}s), fit {s['fit_consensus']:.2f}s, night of tasks {s['night_of_tasks']:.0f}s, "
          f"CLI screen {s['cli_screen']:.2f}s")
    return row


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--large", action="store_true", help="also run 10M labels")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--child", nargs=2, type=int, help=argparse.SUPPRESS)
    parser.add_argument("--apply-child", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--many-sources-child", nargs=3, type=int, help=argparse.SUPPRESS)
    parser.add_argument("--json", type=Path, default=ROOT / "bench" / "results" / "latest.json")
    args = parser.parse_args()
    if args.child:
        print(json.dumps(measure(args.child[0], args.child[1], args.repeat)))
        return
    if args.many_sources_child:
        print(json.dumps(measure_many_sources(*args.many_sources_child)))
        return
    if args.apply_child:
        print(json.dumps(measure_apply(args.apply_child, args.repeat)))
        return
    cases = {"100k": (10_000, 0), "1M": (100_000, 0), "listed100": (10_000, 100)}
    if args.large:
        cases["10M"] = (1_000_000, 0)
    figures = {}
    for name, (n_items, rules) in cases.items():
        repeat = 1 if name == "10M" else args.repeat
        out = subprocess.run([sys.executable, __file__, "--child", str(n_items), str(rules), "--repeat", str(repeat)], capture_output=True, text=True, check=True)
        figures[name] = json.loads(out.stdout.strip().splitlines()[-1])
        s = figures[name]["seconds"]
        print(f"{name:>10}: full screen {s['full_screen']:.2f}s, bare load {s['bare_load']:.2f}s, "
              f"incentives {s['incentives']:.2f}s, peak RSS {figures[name]['peak_rss_mib']:.0f} MiB")
    out = subprocess.run([sys.executable, __file__, "--apply-child", "1000000", "--repeat", str(args.repeat)], capture_output=True, text=True, check=True)
    figures["apply1M"] = json.loads(out.stdout.strip().splitlines()[-1])
    s = figures["apply1M"]["seconds"]
    print(f"{'apply1M':>10}: apply {s['apply']:.2f}s, Parquet read + write floor {s['parquet_floor']:.2f}s")
    figures["many1000x1000"] = many_sources_row(args.repeat)
    one = figures["1M"]["seconds"]
    ratios = {
        "full_over_bare_load_1M": one["full_screen"] / one["bare_load"],
        "threshold_erm_over_sklearn_stump_1M": one["threshold_erm"] / one["sklearn_stump"],
        "exact_gain_fraction_1M": figures["1M"]["exact_gain_fraction"],
        "median_bracket_width_1M": figures["1M"]["median_bracket_width"],
        "apply_over_parquet_floor_1M_items": figures["apply1M"]["seconds"]["apply"] / figures["apply1M"]["seconds"]["parquet_floor"],
    }
    if "10M" in figures:
        ratios["scaling_10M_over_1M"] = figures["10M"]["seconds"]["full_screen"] / one["full_screen"]
        ratios["peak_rss_gib_10M"] = figures["10M"]["peak_rss_mib"] / 1024
    print("\nratios (targets: full/load <= 10, apply/floor <= 1.5, 10M/1M <= 12, ERM/stump <= 1.0, exact >= 0.95, 10M RSS <= 2 GiB)")
    for key, value in ratios.items():
        print(f"  {key:<40} {value:.3f}")
    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(json.dumps({"figures": figures, "ratios": ratios}, indent=2, sort_keys=True))
    print(f"\nfigures written to {args.json}")


if __name__ == "__main__":
    main()
