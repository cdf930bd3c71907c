"""``apply`` with K classes: class names or indices, the default unchanged byte for byte (real Parquet files).

The golden files in tests/golden/apply/ were written by ``apply_rule`` on this branch before it
learnt class names (the code of main at commit adefb98), from the inputs rebuilt below; they were
written with pyarrow 26.0.1, so the byte comparison runs only under that version (the table
comparison always runs).
"""

from __future__ import annotations

from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from inboxes import cli
from test_apply import items, put_in_force
from truthsieve.exceptions import InputError
from truthsieve.pipeline.apply import apply_rule
from truthsieve.pipeline.classes import ClassAlphabet

GOLDEN = Path(__file__).resolve().parents[1] / "golden" / "apply"
GRADES = ClassAlphabet(("reject", "feed", "milling", "premium"))
GOLDEN_CASES = {
    "threshold": ({"kind": "threshold", "feature": "moisture_pct", "cut": 14.25, "above": 0}, {"moisture_pct": [13.0, 14.25, 14.3, 19.0]}),
    "listed": ({"kind": "listed", "name": "dry_enough"}, {"rule__dry_enough": [True, False, True, True]}),
    "constant": ({"kind": "constant", "label": 1}, {"moisture_pct": [13.0, 14.25, 14.3, 19.0]}),
}


@pytest.mark.parametrize("case", sorted(GOLDEN_CASES))
def test_the_default_output_is_unchanged(tmp_path, case):
    rule, columns = GOLDEN_CASES[case]
    put_in_force(tmp_path / "out", "2026-11-02", rule)
    source = items(tmp_path / "lots.parquet", **columns)
    apply_rule(tmp_path / "out", source, tmp_path / "labelled.parquet")
    produced, expected = tmp_path / "labelled.parquet", GOLDEN / f"{case}.parquet"
    assert pq.read_table(produced).equals(pq.read_table(expected), check_metadata=True)
    if pa.__version__ == "26.0.1":
        assert produced.read_bytes() == expected.read_bytes()


def grading_night(tmp_path, rule: dict, classes=GRADES.names, **columns) -> tuple[Path, Path]:
    """A night screened with ``classes`` (the four grades unless given) whose rule is in force."""
    put_in_force(tmp_path / "out", "2026-12-01", rule, classes)
    return tmp_path / "out", items(tmp_path / "lots.parquet", **columns)


def test_a_k_class_threshold_writes_names_or_indices(tmp_path):
    # test weight above 75 kg/hl: milling (2); otherwise feed (1)
    out, source = grading_night(
        tmp_path, {"kind": "threshold", "feature": "test_weight_kg_hl", "cut": 75.0, "above": 2, "below": 1},
        test_weight_kg_hl=[70.0, 75.0, 75.1, 82.0],
    )
    apply_rule(out, source, tmp_path / "names.parquet", classes=GRADES, labels="names")
    written = pq.read_table(tmp_path / "names.parquet")
    assert written.column("label").to_pylist() == ["feed", "feed", "milling", "milling"]
    assert written.schema.metadata[b"truthsieve.classes"] == b'["reject", "feed", "milling", "premium"]'
    apply_rule(out, source, tmp_path / "indices.parquet", classes=GRADES)
    indices = pq.read_table(tmp_path / "indices.parquet").column("label")
    assert indices.type == pa.int16() and indices.to_pylist() == [1, 1, 2, 2]


def test_a_listed_rule_of_class_indices(tmp_path):
    out, source = grading_night(tmp_path, {"kind": "listed", "name": "graded"}, rule__graded=pa.array([3, 0, 2], pa.int8()))
    apply_rule(out, source, tmp_path / "x.parquet", classes=GRADES, labels="names")
    assert pq.read_table(tmp_path / "x.parquet").column("label").to_pylist() == ["premium", "reject", "milling"]


def test_a_listed_value_outside_the_classes_is_refused_naming_file_row_and_column(tmp_path):
    out, source = grading_night(tmp_path, {"kind": "listed", "name": "graded"}, rule__graded=pa.array([3, 0, 4], pa.int8()))
    with pytest.raises(InputError) as error:
        apply_rule(out, source, tmp_path / "x.parquet", classes=GRADES)
    for word in ["lots.parquet", "row 3", "rule__graded", "0..3"]:
        assert word in str(error.value)
    assert not (tmp_path / "x.parquet").exists()


def test_a_configuration_of_other_classes_is_refused(tmp_path):
    # the night was screened with three classes; a two-class configuration is another batch's
    three = ("reject", "feed", "milling")
    out, source = grading_night(tmp_path, {"kind": "constant", "label": 2}, classes=three, moisture_pct=[13.0])
    with pytest.raises(InputError, match=r"has classes \[reject, accept\], but the rule in force since 2026-12-01 was fitted with classes \[reject, feed, milling\]"):
        apply_rule(out, source, tmp_path / "x.parquet", classes=ClassAlphabet(("reject", "accept")))
    # same count, other names or order: still another configuration
    with pytest.raises(InputError, match="was fitted with classes"):
        apply_rule(out, source, tmp_path / "x.parquet", classes=ClassAlphabet(("reject", "milling", "feed")))
    assert not (tmp_path / "x.parquet").exists()
    apply_rule(out, source, tmp_path / "x.parquet", classes=ClassAlphabet(three), labels="names")
    assert pq.read_table(tmp_path / "x.parquet").column("label").to_pylist() == ["milling"]


def test_a_binary_night_refuses_a_configuration_with_classes_and_the_reverse(tmp_path):
    # a binary rule's 0/1 fit inside 0..3, so only the recorded classes can tell the batches apart
    binary = {"kind": "threshold", "feature": "moisture_pct", "cut": 14.5, "above": 0}
    out, source = grading_night(tmp_path / "b", binary, classes=None, moisture_pct=[13.0, 15.0])
    with pytest.raises(InputError, match=r"has classes \[reject, feed, milling, premium\], but .* was fitted with no classes \(binary, 0/1\)"):
        apply_rule(out, source, tmp_path / "x.parquet", classes=GRADES)
    apply_rule(out, source, tmp_path / "x.parquet", classes=ClassAlphabet())  # a configuration without classes
    assert pq.read_table(tmp_path / "x.parquet").column("label").to_pylist() == [1, 0]  # 13.0 -> below = 1, 15.0 -> above = 0
    out, source = grading_night(tmp_path / "k", binary, moisture_pct=[13.0])
    with pytest.raises(InputError, match=r"has no classes \(binary, 0/1\), but .* was fitted with classes \[reject, feed, milling, premium\]"):
        apply_rule(out, source, tmp_path / "y.parquet", classes=ClassAlphabet())


def test_a_rule_outside_its_own_nights_classes_is_still_refused(tmp_path):
    # a hand-edited decision.json: the rule gives class 2, the night records two classes (0..1)
    out, source = grading_night(tmp_path, {"kind": "constant", "label": 2}, classes=("reject", "accept"), moisture_pct=[13.0])
    with pytest.raises(InputError, match="gives class 2, but the configuration has 2 classes"):
        apply_rule(out, source, tmp_path / "x.parquet", classes=ClassAlphabet(("reject", "accept")))


def test_names_need_an_alphabet(tmp_path):
    out, source = grading_night(tmp_path, {"kind": "constant", "label": 1}, moisture_pct=[13.0])
    with pytest.raises(InputError, match="--config"):
        apply_rule(out, source, tmp_path / "x.parquet", labels="names")


def test_names_need_a_configuration_with_classes(tmp_path):
    # without classes the two classes have no names: writing "0"/"1" as names would be a guess
    out, source = grading_night(tmp_path, {"kind": "constant", "label": 1}, classes=None, moisture_pct=[13.0])
    with pytest.raises(InputError, match="^--labels names needs a configuration with classes"):
        apply_rule(out, source, tmp_path / "x.parquet", classes=ClassAlphabet(), labels="names")
    assert not (tmp_path / "x.parquet").exists()


def test_the_command_line_writes_names_from_the_config_and_refuses_in_one_line(tmp_path):
    out, source = grading_night(
        tmp_path, {"kind": "threshold", "feature": "moisture_pct", "cut": 14.5, "above": 1, "below": 3}, moisture_pct=[13.0, 15.0]
    )
    config = tmp_path / "grades.yaml"
    config.write_text(
        "rule_class: {kind: threshold, features: [moisture_pct]}\nmechanism: tuned_dictator\n"
        "sources: [{source_id: lab, weight: 1.0}]\nclasses: [reject, feed, milling, premium]\n"
    )
    target = tmp_path / "graded.parquet"
    base = ("apply", "--out", str(out), "--items", str(source), "--write", str(target))
    result = cli(*base, "--config", str(config), "--labels", "names")
    assert result.returncode == 0, result.stderr
    assert pq.read_table(target).column("label").to_pylist() == ["premium", "feed"]
    refused = cli(*base, "--labels", "names")
    assert refused.returncode == 2 and len(refused.stderr.strip().splitlines()) == 1 and "--config" in refused.stderr
    unknown = cli(*base, "--labels", "words")
    assert unknown.returncode == 2 and len(unknown.stderr.strip().splitlines()) == 1


CONFIG = Path(__file__).resolve().parents[2] / "config"


def test_the_command_line_refuses_the_grades_configuration_on_binary_nights_in_one_line(tmp_path):
    # the new-user review's case: out/demo's nights are binary, config/grades.yaml names four classes
    out, source = grading_night(tmp_path, {"kind": "threshold", "feature": "moisture_pct", "cut": 14.5, "above": 0}, classes=None, moisture_pct=[13.0])
    target = tmp_path / "a.parquet"
    refused = cli("apply", "--out", str(out), "--items", str(source), "--write", str(target), "--config", str(CONFIG / "grades.yaml"))
    assert refused.returncode == 2 and len(refused.stderr.strip().splitlines()) == 1, refused.stderr
    for words in ("grades.yaml has classes [reject, feed, milling, premium]", "fitted with no classes (binary, 0/1)", "2026-12-01"):
        assert words in refused.stderr
    assert not target.exists()
    accepted = cli("apply", "--out", str(out), "--items", str(source), "--write", str(target), "--config", str(CONFIG / "demo.yaml"))
    assert accepted.returncode == 0, accepted.stderr
    assert pq.read_table(target).column("label").to_pylist() == [1]  # 13.0 is not above 14.5: below = 1 - above = 1


def test_the_command_line_refuses_names_from_a_configuration_without_classes(tmp_path):
    out, source = grading_night(tmp_path, {"kind": "constant", "label": 1}, classes=None, moisture_pct=[13.0])
    target = tmp_path / "a.parquet"
    refused = cli("apply", "--out", str(out), "--items", str(source), "--write", str(target), "--config", str(CONFIG / "demo.yaml"), "--labels", "names")
    assert refused.returncode == 2 and len(refused.stderr.strip().splitlines()) == 1, refused.stderr
    assert refused.stderr.startswith("error: --labels names needs a configuration with classes") and "demo.yaml" in refused.stderr
    assert not target.exists()
