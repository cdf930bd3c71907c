"""The grades demo's invented data has the properties its story claims (read back from the real Parquet inbox).

This checks the generated data, not the pipeline's output on it (the K-class core is another change).
The class limits are restated here from the story (pipeline/demo_grades.py's docstring), so a change
of the generator's constants is caught rather than copied.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest
import yaml

from truthsieve.pipeline import demo_grades
from truthsieve.pipeline.classes import ClassAlphabet, decode_labels
from truthsieve.pipeline.config import load_config

ROOT = Path(__file__).resolve().parents[2]
GRADES = ClassAlphabet(("reject", "feed", "milling", "premium"))
REJECT, FEED, MILLING, PREMIUM = 0, 1, 2, 3
STRATEGIC = "farm-alder"
HONEST_RATES = {"coop-lab": 0.01, "farm-birch": 0.03, "farm-cedar": 0.03, "farm-dunmore": 0.03, "farm-elm": 0.05}
SEEDS = [demo_grades.SEED, 7]


def story_truth(moisture: np.ndarray, weight: np.ndarray) -> np.ndarray:
    # reject above 16.0 % moisture; otherwise feed below 75.0 kg/hl, milling below 80.0, premium from 80.0
    return np.select([moisture > 16.0, weight < 75.0, weight < 80.0], [REJECT, FEED, MILLING], PREMIUM)


def in_band(moisture: np.ndarray, weight: np.ndarray) -> np.ndarray:
    # the strategic member's lots: true grade feed, test weight within 1.5 kg/hl below the 75.0 boundary
    return (story_truth(moisture, weight) == FEED) & (weight >= 73.5) & (weight < 75.0)


def read_inbox(inbox: Path):
    """{date: (items frame, {source: labels aligned with items, or the decode errors})}."""
    nights = {}
    for folder in sorted(inbox.glob("batch_date=*")):
        items = pq.read_table(folder / "items.parquet").to_pandas().set_index("item_id")
        labels = {}
        for source_folder in sorted(folder.glob("source_id=*")):
            path = source_folder / "grades.parquet"
            table = pq.ParquetFile(path).read()
            name = path.relative_to(inbox).as_posix()
            indices, errors = decode_labels(name, table.column("label"), GRADES)
            if errors:
                labels[source_folder.name.removeprefix("source_id=")] = errors
                continue
            position = items.index.get_indexer(table.column("item_id").to_pylist())
            assert (position >= 0).all() and len(set(position)) == len(items)
            aligned = np.empty(len(items), dtype=np.int8)
            aligned[position] = indices
            labels[source_folder.name.removeprefix("source_id=")] = aligned
        nights[folder.name.removeprefix("batch_date=")] = (items, labels)
    return nights


@pytest.fixture(scope="module", params=SEEDS)
def generated(request, tmp_path_factory):
    inbox = tmp_path_factory.mktemp(f"grades-{request.param}")
    dates = demo_grades.generate_inbox(inbox, seed=request.param)
    return dates, read_inbox(inbox)


def test_the_story_truth_by_hand():
    moisture = np.array([16.0, 16.1, 12.0, 12.0, 12.0, 12.0, 12.0])
    weight = np.array([74.9, 82.0, 73.5, 75.0, 79.9, 80.0, 73.4])
    assert story_truth(moisture, weight).tolist() == [FEED, REJECT, FEED, MILLING, MILLING, PREMIUM, FEED]
    assert in_band(moisture, weight).tolist() == [True, False, True, False, False, False, False]
    lots = {"moisture_pct": moisture, "test_weight_kg_hl": weight}
    assert demo_grades.true_grades(lots).tolist() == story_truth(moisture, weight).tolist()


def test_seven_nights_every_encoding_and_one_typo(generated):
    dates, nights = generated
    assert dates == [f"2026-12-{d:02d}" for d in range(7, 14)] and sorted(nights) == dates
    for night, date in enumerate(dates, start=1):
        items, labels = nights[date]
        assert len(items) == 240 and sorted(labels) == sorted([*HONEST_RATES, STRATEGIC])
        for source, value in labels.items():
            if (source, night) == ("farm-elm", 5):
                assert [(e.file, e.row, e.column, e.rule) for e in value] == [
                    (f"batch_date={date}/source_id=farm-elm/grades.parquet", 12, "label", "unknown_class_name")
                ]
            else:
                assert isinstance(value, np.ndarray), (date, source, value)
    first = nights[dates[0]][0]
    assert first["moisture_pct"].between(10, 20).all() and first["test_weight_kg_hl"].between(68, 84).all()


def test_the_label_files_use_names_and_indices(tmp_path):
    demo_grades.generate_inbox(tmp_path)
    folder = tmp_path / "batch_date=2026-12-07"
    kinds = {s: str(pq.read_schema(folder / f"source_id={s}" / "grades.parquet").field("label").type) for s in [STRATEGIC, *HONEST_RATES]}
    assert kinds == {
        "coop-lab": "dictionary<values=string, indices=int32, ordered=0>", "farm-birch": "string", "farm-elm": "string",
        "farm-alder": "int8", "farm-dunmore": "int8", "farm-cedar": "int64",
    }


def test_the_strategic_member_bends_only_the_band_below_the_boundary(generated):
    dates, nights = generated
    for night, date in enumerate(dates, start=1):
        items, labels = nights[date]
        moisture, weight = items["moisture_pct"].to_numpy(), items["test_weight_kg_hl"].to_numpy()
        truth, band = story_truth(moisture, weight), in_band(moisture, weight)
        strategic = labels[STRATEGIC]
        honest = np.stack([labels[s] for s in HONEST_RATES if isinstance(labels[s], np.ndarray)])
        majority = np.array([np.bincount(column, minlength=4).argmax() for column in honest.T])
        assert band.sum() >= 10  # enough lots near the boundary for the bending to show
        if night >= 3:
            # exactly the band lots differ from the truth, and there it says milling
            assert np.array_equal(strategic != truth, band)
            assert (strategic[band] == MILLING).all()
            # against the honest members: off the band it agrees as often as their slips allow; on it, hardly ever
            assert (strategic[~band] == majority[~band]).mean() >= 0.97
            assert (strategic[band] == majority[band]).mean() <= 0.1
        else:
            assert (strategic[band] == FEED).mean() >= 0.8  # honest before night 3


def test_honest_graders_agree_with_the_truth_at_their_designed_rate(generated):
    _, nights = generated
    for source, rate in HONEST_RATES.items():
        off = total = 0
        for items, labels in nights.values():
            if not isinstance(labels[source], np.ndarray):
                continue  # the night of the typo: that file is quarantined whole
            truth = story_truth(items["moisture_pct"].to_numpy(), items["test_weight_kg_hl"].to_numpy())
            difference = labels[source].astype(int) - truth
            assert set(np.abs(difference)) <= {0, 1}, source  # a slip is one class off
            off += int((difference != 0).sum())
            total += len(truth)
        # binomial count of slips: within 4 standard deviations of n * rate
        assert abs(off - total * rate) <= 4 * math.sqrt(total * rate * (1 - rate)), (source, off, total)


def test_slips_from_the_middle_classes_go_up_and_down_alike(generated):
    _, nights = generated
    up = middle = 0
    for items, labels in nights.values():
        truth = story_truth(items["moisture_pct"].to_numpy(), items["test_weight_kg_hl"].to_numpy())
        for source in HONEST_RATES:
            if isinstance(labels[source], np.ndarray):
                slip = (labels[source] != truth) & np.isin(truth, [FEED, MILLING])
                middle += int(slip.sum())
                up += int((slip & (labels[source] > truth)).sum())
    # each slip goes up with probability 1/2: within 4 standard deviations of middle / 2
    assert middle >= 50 and abs(up - middle / 2) <= 4 * math.sqrt(middle / 4), (up, middle)


def test_the_same_seed_gives_the_same_bytes_and_another_seed_other_lots(tmp_path):
    one, two, other = tmp_path / "one", tmp_path / "two", tmp_path / "other"
    demo_grades.generate_inbox(one)
    demo_grades.generate_inbox(two)
    demo_grades.generate_inbox(other, seed=demo_grades.SEED + 1)
    files = sorted(p.relative_to(one) for p in one.rglob("*.parquet"))
    assert len(files) == 7 * 7
    assert all((one / f).read_bytes() == (two / f).read_bytes() for f in files)
    assert (one / files[0]).read_bytes() != (other / files[0]).read_bytes()


def test_the_stored_config_is_the_demo_config():
    path = ROOT / "config" / "grades.yaml"
    assert yaml.safe_load(path.read_text()) == demo_grades.demo_config_dict()
    config = load_config(path)
    assert config.class_alphabet == GRADES and config == demo_grades.demo_config()
