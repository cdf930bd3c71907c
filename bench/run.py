"""Benchmarks of one nightly screen: prints every figure of the performance targets.

    python bench/run.py            # 100k and 1M labels, source scaling, start-up, listed
    python bench/run.py --large    # adds 10M labels (several minutes, a few GiB)
    python bench/run.py --huge     # adds 100M labels (10M items x 10 sources; not in CI)
    python bench/run.py --classes-only --repeat 1   # only the K = 4 against K = 2 row
    python bench/run.py --many-sources-only --repeat 1   # only 1,000 sources x 1,000 items (DAG steps)

Each case runs in a child process so peak resident memory is its own. Figures are
medians over --repeat runs. Synthetic data only (fixed seeds). The *tight floor* is
what any exact screen must at least do: read every Parquet file, join item ids to
row numbers with ``pyarrow.compute.index_in``, turn labels into NumPy and argsort
each feature once.
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


def make_inbox(folder: Path, n_items: int, listed_rules: int = 0, seed: int = 0, n_sources: int = N_SOURCES, coverage: float = 1.0) -> dict:
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
    id_array = pa.array(ids)
    for s in range(n_sources):
        labels = truth ^ (rng.random(n_items) < 0.05 + 0.02 * (s % 10))
        if s == 0:
            labels = features["f0"] > 0.4  # one rule-shaped source
        keep = np.flatnonzero(rng.random(n_items) < coverage) if coverage < 1.0 else np.arange(n_items)
        (batch / f"source_id=s{s:04d}").mkdir(exist_ok=True)
        table = pa.table({"item_id": id_array.take(pa.array(keep)), "label": pa.array(labels[keep])})
        pq.write_table(table, batch / f"source_id=s{s:04d}" / "labels.parquet")
    kind = "listed" if listed_rules else "threshold"
    return {
        "rule_class": {"kind": kind, "features": [] if listed_rules else list(features)},
        "mechanism": "tuned_dictator",
        "sources": [{"source_id": f"s{s:04d}", "weight": 1.0 + s % 3} for s in range(n_sources)],
    }


def tight_floor(batch: Path, features: list[str]) -> None:
    """Read every file, join ids with ``index_in``, labels to NumPy, argsort each feature once."""
    import pyarrow.compute as pc

    items = pq.ParquetFile(batch / "items.parquet").read()
    item_ids = items.column("item_id")
    for path in sorted(batch.glob("source_id=*/*.parquet")):
        table = pq.ParquetFile(path).read()
        pc.index_in(table.column("item_id"), value_set=item_ids).to_numpy(zero_copy_only=False)
        table.column("label").to_numpy()
    for name in features:
        np.argsort(items.column(name).to_numpy(), kind="stable")


def screen_to_fresh_out(inbox: Path, config) -> None:
    """The full screen as the command line runs it (``screen`` → ``screen_night``: validation,
    work area, fit, per-source analysis in process, decide, publish) into a new out folder
    outside the inbox, so every repeat is a first screen of the night."""
    from truthsieve.pipeline.screen import screen

    with tempfile.TemporaryDirectory(prefix="bench-out-") as out:
        screen(inbox, "2026-01-01", config, Path(out) / "out", workers=1)


def measure_screen(n_items: int, n_sources: int, coverage: float, repeat: int) -> dict:
    """Runs inside the child process: the full screen only, for source scaling."""
    from truthsieve.pipeline.config import Config

    with tempfile.TemporaryDirectory() as tmp:
        inbox = Path(tmp)
        config = Config.model_validate(make_inbox(inbox, n_items, n_sources=n_sources, coverage=coverage))
        times = []
        for _ in range(repeat):
            start = time.perf_counter()
            screen_to_fresh_out(inbox, config)
            times.append(time.perf_counter() - start)
    return {"seconds": {"full_screen": statistics.median(times)}, "peak_rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}


def timer(times: dict[str, list[float]]):
    """``timed(name, call)``: call, append its wall time to ``times[name]``, return its value."""

    def timed(name, call):
        start = time.perf_counter()
        value = call()
        times.setdefault(name, []).append(time.perf_counter() - start)
        return value

    return timed


def measure_startup(repeat: int) -> dict:
    """Wall time of importing the CLI in a fresh process, and the slowest imports."""
    walls, cumulative = [], []
    for _ in range(repeat):
        start = time.perf_counter()
        out = subprocess.run([sys.executable, "-X", "importtime", "-c", "import truthsieve.pipeline.cli, truthsieve.pipeline.screen"], capture_output=True, text=True, check=True)
        walls.append(time.perf_counter() - start)
        rows = [line.split("|") for line in out.stderr.splitlines() if line.startswith("import time:") and "|" in line]
        total = sum(int(r[1]) for r in rows if not r[2].startswith(" " * 2) and r[1].strip().isdigit())
        cumulative.append(total / 1e6)
    start = time.perf_counter()
    subprocess.run([sys.executable, "-c", "pass"], check=True)
    bare = time.perf_counter() - start
    return {"startup_wall": statistics.median(walls), "imports": statistics.median(cumulative), "bare_python": bare}


def measure(n_items: int, listed_rules: int, repeat: int) -> dict:
    """Runs inside the child process: the floors, then the night's own steps
    (:mod:`truthsieve.pipeline.night`, as ``screen_night`` runs them, work area in memory)
    one by one for the phase split, then the whole command-line screen."""
    from truthsieve.pipeline import night as steps
    from truthsieve.pipeline.config import Config
    from truthsieve.pipeline.records import Intake
    from truthsieve.pipeline.store import LocalStore

    date = "2026-01-01"
    with tempfile.TemporaryDirectory() as tmp:
        inbox = Path(tmp) / "inbox"
        config = Config.model_validate(make_inbox(inbox, n_items, listed_rules))
        times: dict[str, list[float]] = {}
        timed = timer(times)

        for repeat_number in range(repeat):
            batch = inbox / f"batch_date={date}"

            def bare_load():
                """Every file read and every column turned into a NumPy array."""
                tables = [pq.read_table(batch / "items.parquet"), *(pq.read_table(p) for p in sorted(batch.glob("source_id=*/*.parquet")))]
                return [[column.to_numpy(zero_copy_only=False) for column in table.columns] for table in tables]

            timed("bare_load", bare_load)
            timed("tight_floor", lambda: tight_floor(batch, [] if listed_rules else [f"f{k}" for k in range(N_FEATURES)]))
            store = LocalStore(inbox, Path(tmp) / f"out{repeat_number}", run="bench")
            with store.work_in_memory():
                folders = steps.start_night(store, date)
                items = timed("check_items", lambda: steps.check_items(store, date, config, columns_checked=True))
                index = steps.item_index(items)
                intake = timed("validate_sources", lambda: Intake(date, items, steps.validate_sources(store, date, folders, config, index)))
                fit = timed("consensus_fit", lambda: steps.fit_consensus(store, date, config, intake))
                results = timed("incentives", lambda: [steps.analyse_source(store, date, config, s, fit) for s in fit.source_ids])
                published = timed("decide_publish", lambda: steps.publish_night(store, date, config, intake=intake, incentives=results))
            timed("full_screen", lambda: screen_to_fresh_out(inbox, config))
            report_bytes = (published.output / "report.html").stat().st_size
            rule_class = fit.rule_class
            if rule_class.kind == "threshold":
                from sklearn.tree import DecisionTreeClassifier

                costs = fit.totals
                cost0, cost1 = costs[:, 0], costs[:, 1]
                features = np.column_stack([f.values for f in rule_class.features])
                y = (cost0 > cost1).astype(int)
                weight = np.abs(cost0 - cost1)
                timed("threshold_erm", lambda: rule_class.fit(costs))
                timed("sklearn_stump", lambda: DecisionTreeClassifier(max_depth=1).fit(features, y, sample_weight=weight))
    medians = {k: statistics.median(v) for k, v in times.items()}
    exact = [r.gain_exact for r in results]
    widths = [r.gain_upper - r.gain_lower for r in results]
    return {
        "labels": n_items * N_SOURCES,
        "seconds": medians,
        "report_html_mb": report_bytes / 1e6,
        "exact_gain_fraction": sum(exact) / len(exact),
        "median_bracket_width": statistics.median(widths),
        "peak_rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    }


def measure_classes(n_items: int, n_classes: int, repeat: int) -> dict:
    """Runs inside the child process: the core's steps for ``n_classes`` classes on
    ``N_SOURCES x n_items`` labels (threshold class on every feature): label matrix,
    consensus fit, tuned dictator, every source's incentives (budget 64). In-memory
    tables, so K = 2 and K > 2 are timed on the same path (the pipeline's K-class
    ingest is measured by the screen rows once it exists)."""
    import pandas as pd

    from truthsieve.core import build_label_matrix, build_rule_class, fit_consensus, run_mechanism
    from truthsieve.core.incentives import incentives

    rng = np.random.default_rng(3)
    features = {f"f{k}": np.round(rng.normal(0, 1, n_items), 3) for k in range(N_FEATURES)}
    items = pd.DataFrame({"item_id": [f"i{k:08d}" for k in range(n_items)], **features})
    edges = np.quantile(features["f0"], np.linspace(0, 1, n_classes + 1)[1:-1])
    truth = np.digitize(features["f0"] + 0.3 * features["f1"], edges)
    frames = []
    for s in range(N_SOURCES):
        noisy = rng.random(n_items) < 0.05 + 0.02 * (s % 10)
        labels = np.digitize(features["f0"], edges) if s == 0 else np.where(noisy, rng.integers(0, n_classes, n_items), truth)
        frames.append(pd.DataFrame({"item_id": items["item_id"], "source_id": f"s{s:04d}", "label": labels}))
    labels = pd.concat(frames, ignore_index=True)
    weights = {f"s{s:04d}": 1.0 + s % 3 for s in range(N_SOURCES)}
    times: dict[str, list[float]] = {}
    timed = timer(times)

    for _ in range(repeat):
        start = time.perf_counter()
        matrix = timed("label_matrix", lambda: build_label_matrix(labels, items, weights, n_classes=n_classes))
        rule_class = build_rule_class("threshold", items, matrix.item_ids, list(features), n_classes)
        consensus = timed("consensus_fit", lambda: fit_consensus(matrix, rule_class))
        timed("mechanism", lambda: run_mechanism("tuned_dictator", matrix, rule_class, consensus))
        timed("incentives", lambda: incentives(matrix, rule_class, consensus, 64))
        times.setdefault("core_total", []).append(time.perf_counter() - start)
    return {
        "labels": n_items * N_SOURCES,
        "n_classes": n_classes,
        "rules": rule_class.size,
        "seconds": {k: statistics.median(v) for k, v in times.items()},
        "peak_rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    }


def classes_row(repeat: str) -> dict:
    """K = 4 against K = 2 at 1M labels (10 sources x 100k items), the core's steps."""
    binary = child("--classes-child", "100000", "2", "--repeat", repeat)
    four = child("--classes-child", "100000", "4", "--repeat", repeat)
    ratio = four["seconds"]["core_total"] / binary["seconds"]["core_total"]
    for row in (binary, four):
        s = row["seconds"]
        print(f"{'K' + str(row['n_classes']) + ' 1M':>10}: core {s['core_total']:.2f}s (matrix {s['label_matrix']:.2f}s, "
              f"fit {s['consensus_fit']:.2f}s, mechanism {s['mechanism']:.2f}s, incentives {s['incentives']:.2f}s), "
              f"{row['rules']} rules, peak RSS {row['peak_rss_mib']:.0f} MiB", flush=True)
    print(f"{'K4/K2':>10}: {ratio:.2f}", flush=True)
    return {"K2": binary, "K4": four, "ratio_k4_over_k2": ratio}


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

    from truthsieve.airflow.operators import (
        CheckItemsOperator, DecideAndPublishOperator, FitConsensusOperator, SourceIncentiveOperator, ValidateSourceOperator,
    )
    from truthsieve.pipeline import analysis, night as night_steps
    from truthsieve.pipeline.config import Config
    from truthsieve.pipeline.store import LocalStore

    # Count whole-matrix builds per step: wrap prepare wherever a module holds the name.
    prepares: dict[str, int] = {}
    step = ["none"]
    whole = analysis.prepare

    def counted(*args, **kwargs):
        prepares[step[0]] = prepares.get(step[0], 0) + 1
        return whole(*args, **kwargs)

    for module in (analysis, night_steps):
        if hasattr(module, "prepare"):
            module.prepare = counted

    with tempfile.TemporaryDirectory() as tmp:
        inbox, out = Path(tmp) / "inbox", Path(tmp) / "out"
        raw = make_many_sources_inbox(inbox, n_sources, n_items)
        (Path(tmp) / "config.yaml").write_text(yaml.safe_dump(raw))
        paths = {"inbox": str(inbox), "batch_date": "2026-01-01", "config_path": str(Path(tmp) / "config.yaml"), "out": str(out)}

        def timed(call, name="none"):
            step[0] = name
            start = time.perf_counter()
            call()
            return time.perf_counter() - start

        check = timed(lambda: CheckItemsOperator(task_id="check_items", **paths).run({}), "check_items")
        validate = [timed(lambda s=s: ValidateSourceOperator(task_id="v", source_folder=f"source_id=s{s:04d}", **paths).run({}), "validate_source") for s in range(n_sources)]
        fit = timed(lambda: FitConsensusOperator(task_id="fit_consensus", **paths).run({}), "fit_consensus")
        picks = np.linspace(0, n_sources - 1, sample).round().astype(int)
        incentive = [timed(lambda s=s: SourceIncentiveOperator(task_id="i", source_id=f"s{s:04d}", **paths).run({}), "source_incentive") for s in picks]
        # The decide step reads every source's incentives: the unsampled ones are analysed
        # untimed in one process over one fit (the same step function, the same floats).
        step[0] = "source_incentive_untimed"
        config = Config.model_validate(raw)
        store = LocalStore(inbox, out)
        shared = night_steps.fit_consensus(store, "2026-01-01", config)
        for s in sorted(set(range(n_sources)) - set(picks.tolist())):
            night_steps.analyse_source(store, "2026-01-01", config, f"s{s:04d}", shared)
        publish_step = timed(lambda: DecideAndPublishOperator(task_id="decide_and_publish", **paths).run({}), "decide_and_publish")
        cli_screen = timed(lambda: screen_to_fresh_out(inbox, config), "cli_screen")
    per_source = statistics.median(validate) + statistics.median(incentive)
    night = check + sum(validate) + fit + n_sources * statistics.median(incentive) + publish_step
    return {
        "sources": n_sources,
        "labels": n_sources * n_items,
        "seconds": {
            "check_items": check,
            "validate_source_median": statistics.median(validate),
            "fit_consensus": fit,
            "source_incentive_median": statistics.median(incentive),
            "per_source_steps": per_source,
            "decide_and_publish": publish_step,
            "night_of_tasks": night,
            "cli_screen": cli_screen,
        },
        "prepare_calls": {k: v for k, v in prepares.items() if k != "source_incentive_untimed"},
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
          f"decide+publish {s['decide_and_publish']:.2f}s, CLI screen {s['cli_screen']:.2f}s")
    print(f"{'':>10}  per source / night of tasks {row['per_source_over_night']:.5f}; prepare calls per step "
          f"{row['prepare_calls']} ({row['incentive_sample']} source_incentive tasks timed)")
    return row


def child(*arguments: str) -> dict:
    out = subprocess.run([sys.executable, __file__, *arguments], capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--large", action="store_true", help="also run 10M labels")
    parser.add_argument("--huge", action="store_true", help="also run 100M labels (10M items x 10 sources)")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--child", nargs=2, type=int, help=argparse.SUPPRESS)
    parser.add_argument("--screen-child", nargs=3, type=float, help=argparse.SUPPRESS)
    parser.add_argument("--apply-child", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--many-sources-child", nargs=3, type=int, help=argparse.SUPPRESS)
    parser.add_argument("--classes-child", nargs=2, type=int, help=argparse.SUPPRESS)
    parser.add_argument("--classes-only", action="store_true", help="run only the K = 4 against K = 2 row")
    parser.add_argument("--many-sources-only", action="store_true", help="run only the 1,000 sources x 1,000 items row (DAG steps)")
    parser.add_argument("--json", type=Path, default=ROOT / "bench" / "results" / "latest.json")
    args = parser.parse_args()
    if args.child:
        print(json.dumps(measure(args.child[0], args.child[1], args.repeat)))
        return
    if args.many_sources_child:
        print(json.dumps(measure_many_sources(*args.many_sources_child)))
        return
    if args.classes_child:
        print(json.dumps(measure_classes(args.classes_child[0], args.classes_child[1], args.repeat)))
        return
    if args.many_sources_only:
        row = many_sources_row(args.repeat)
        args.json.parent.mkdir(parents=True, exist_ok=True)
        args.json.with_name("many_sources.json").write_text(json.dumps(row, indent=2, sort_keys=True))
        return
    if args.classes_only:
        classes_row(str(args.repeat))
        return
    if args.screen_child:
        n_items, n_sources, coverage = args.screen_child
        print(json.dumps(measure_screen(int(n_items), int(n_sources), coverage, args.repeat)))
        return
    if args.apply_child:
        print(json.dumps(measure_apply(args.apply_child, args.repeat)))
        return
    repeat = str(args.repeat)
    cases = {"100k": (10_000, 0), "1M": (100_000, 0), "listed100": (10_000, 100)}
    if args.large:
        cases["10M"] = (1_000_000, 0)
    if args.huge:
        cases["100M"] = (10_000_000, 0)
    figures = {}
    for name, (n_items, rules) in cases.items():
        figures[name] = child("--child", str(n_items), str(rules), "--repeat", "1" if name in ("10M", "100M") else repeat)
        s = figures[name]["seconds"]
        print(f"{name:>10}: full screen {s['full_screen']:.2f}s, tight floor {s['tight_floor']:.2f}s, "
              f"incentives {s['incentives']:.2f}s, peak RSS {figures[name]['peak_rss_mib']:.0f} MiB, "
              f"report.html {figures[name]['report_html_mb']:.2f} MB", flush=True)
        print("            phases: " + ", ".join(f"{k} {v:.2f}s" for k, v in s.items()), flush=True)
    for name, shape in {"1000x1000": ("1000", "1000", "1.0"), "100x10pct": ("100000", "100", "0.1")}.items():
        figures[name] = child("--screen-child", *shape, "--repeat", repeat)
        print(f"{name:>10}: full screen {figures[name]['seconds']['full_screen']:.2f}s", flush=True)
    figures["startup"] = measure_startup(args.repeat)
    print(f"{'startup':>10}: import cli + screen {figures['startup']['startup_wall']:.2f}s wall "
          f"(bare python {figures['startup']['bare_python']:.2f}s; -X importtime sum {figures['startup']['imports']:.2f}s)")
    figures["apply1M"] = child("--apply-child", "1000000", "--repeat", repeat)
    s = figures["apply1M"]["seconds"]
    print(f"{'apply1M':>10}: apply {s['apply']:.2f}s, Parquet read + write floor {s['parquet_floor']:.2f}s")
    figures["many1000x1000"] = many_sources_row(args.repeat)
    figures["classes1M"] = classes_row(repeat)
    one = figures["1M"]["seconds"]
    ratios = {
        "full_over_tight_floor_1M": one["full_screen"] / one["tight_floor"],
        "sources_1000x1000_over_10x100k": figures["1000x1000"]["seconds"]["full_screen"] / one["full_screen"],
        "partial_100x10pct_over_10x100k": figures["100x10pct"]["seconds"]["full_screen"] / one["full_screen"],
        "exact_gain_fraction_1M": figures["1M"]["exact_gain_fraction"],
        "median_bracket_width_1M": figures["1M"]["median_bracket_width"],
        "threshold_erm_over_sklearn_stump_1M": one["threshold_erm"] / one["sklearn_stump"],
        "startup_seconds": figures["startup"]["startup_wall"],
        "full_over_bare_load_1M": one["full_screen"] / one["bare_load"],
        "apply_over_parquet_floor_1M_items": figures["apply1M"]["seconds"]["apply"] / figures["apply1M"]["seconds"]["parquet_floor"],
        "classes_k4_over_k2_core_1M": figures["classes1M"]["ratio_k4_over_k2"],
    }
    if "10M" in figures:
        ratios["scaling_10M_over_1M"] = figures["10M"]["seconds"]["full_screen"] / one["full_screen"]
        ratios["peak_rss_gib_10M"] = figures["10M"]["peak_rss_mib"] / 1024
        ratios["report_html_mb_10M"] = figures["10M"]["report_html_mb"]
    if "100M" in figures:
        ratios["minutes_100M"] = figures["100M"]["seconds"]["full_screen"] / 60
        ratios["peak_rss_gib_100M"] = figures["100M"]["peak_rss_mib"] / 1024
    print("\nratios (targets: full/floor <= 3, 1000x1000 and 100x10% over 10x100k <= 1.5, exact = 1, ERM/stump <= 0.2,\n"
          "        start-up <= 0.8 s, 10M/1M <= 11, 10M RSS <= 1 GiB, 10M report <= 2 MB, 100M <= 20 min and <= 8 GiB)")
    for key, value in ratios.items():
        print(f"  {key:<40} {value:.3f}")
    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(json.dumps({"figures": figures, "ratios": ratios}, indent=2, sort_keys=True))
    print(f"\nfigures written to {args.json}")


if __name__ == "__main__":
    main()
