"""Outputs with named classes: rules in words, flag wording for K > 2, the majority-class plot,
decision.json's ``classes`` key, and a constant K = 4 night through the real command line."""

from __future__ import annotations

import json

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import yaml

from decision_support import source_entry
from inboxes import cli
from truthsieve.pipeline.config import Config, RoutingPolicy
from truthsieve.pipeline.evidence import flag_sentence
from truthsieve.pipeline.report_charts import class_plot, majority_classes
from truthsieve.pipeline.report_html import rule_text
from truthsieve.pipeline.routing import flag_sentence as reason_words

GRADES = ["reject", "feed", "milling", "premium"]
THRESHOLD = {"kind": "threshold", "feature": "test_weight_kg_hl", "cut": 80.0, "above": 3, "below": 2}


def test_binary_rules_read_as_before():
    # the words the report used before K classes (report_html.rule_text at c054eb6)
    assert rule_text({"kind": "constant", "label": 1}) == "accept every lot"
    assert rule_text({"kind": "constant", "label": 0}) == "reject every lot"
    assert rule_text({"kind": "threshold", "feature": "m", "cut": 14.25, "above": 0, "below": 1}) == "m > 14.25: reject; otherwise accept"
    assert rule_text({"kind": "threshold", "feature": "m", "cut": 14.25, "above": 1}) == "m > 14.25: accept; otherwise reject"


def test_k_class_rules_name_their_classes():
    assert rule_text(THRESHOLD, GRADES) == "test_weight_kg_hl > 80: premium (3); otherwise milling (2)"
    assert rule_text({"kind": "constant", "label": 2}, GRADES) == "milling (2) for every lot"
    # unnamed and outside 0/1 (a decision without its classes): the index, never accept/reject
    assert rule_text(THRESHOLD) == "test_weight_kg_hl > 80: class 3; otherwise class 2"


def test_flag_wording_for_more_than_two_classes():
    policy = RoutingPolicy()
    source = source_entry(balanced_accuracy=0.5, positive_rate=0.9, drift_positive_rate_p=0.001)
    binary = flag_sentence("low_reliability", source, policy)
    assert "mean of accept and reject lots" in binary and "balanced accuracy" in binary
    many = flag_sentence("low_reliability", source, policy, classes=GRADES)
    assert "accept" not in many and "macro-averaged recall" in many and "4 classes" in many
    assert "lots accepted moved" in flag_sentence("drift_positive_rate", source, policy)
    assert "graded other than reject (class 0) moved" in flag_sentence("drift_positive_rate", source, policy, classes=GRADES)
    two_named = flag_sentence("low_reliability", source, policy, classes=["reject", "accept"])
    assert two_named == binary


def test_routing_reasons_change_words_only_for_more_than_two_classes():
    base = {"rule_class": {"kind": "constant"}, "mechanism": "tuned_dictator", "sources": [{"source_id": "a", "weight": 1.0}]}
    binary, grades = Config.model_validate(base), Config.model_validate({**base, "classes": GRADES})
    assert reason_words("drift_positive_rate", binary) == "its accept rate moved away from its own recent history"
    assert "other than class 0" in reason_words("drift_positive_rate", grades)
    assert "macro-averaged recall" in reason_words("low_reliability", grades)
    assert reason_words("pulls_fit", grades) == reason_words("pulls_fit", binary)
    duo = Config.model_validate({**base, "classes": ["reject", "accept"]})  # two named classes read as binary
    assert reason_words("drift_positive_rate", duo) == reason_words("drift_positive_rate", binary)


def test_majority_class_and_its_share_by_hand():
    # three sources, four lots; lot 3 is labelled by two sources only, lot 4 by nobody
    labels = np.array([[1, 2, 3, 0], [1, 2, 0, 0], [2, 3, 0, 0]])
    labelled = np.array([[1, 1, 1, 0], [1, 1, 1, 0], [1, 1, 0, 0]], dtype=bool)
    majority, share = majority_classes(labels, labelled, 4)
    # lot 1: 1,1,2 -> class 1, 2/3; lot 2: 2,2,3 -> class 2, 2/3; lot 3: 3,0 -> tie, lower class 0, 1/2; lot 4: none -> 0, 0
    assert majority.tolist() == [1, 2, 0, 0]
    assert share.tolist() == pytest.approx([2 / 3, 2 / 3, 1 / 2, 0.0])


def test_the_class_plot_bins_many_lots_and_names_every_class():
    rng = np.random.default_rng(5)
    values = rng.uniform(70, 84, 1000)
    svg = class_plot(values, rng.integers(0, 4, 1000), rng.uniform(0.25, 1, 1000), "w", {"consensus fit": 75.0, "drawn": None}, GRADES)
    assert "1000 lots in" in svg and "(bin, class) groups" in svg
    assert [f"{n} ({k})" in svg for k, n in enumerate(GRADES)] == [True] * 4
    assert "consensus fit cut 75" in svg and "drawn cut" not in svg


def _constant_night(tmp_path, mechanism="tuned_dictator"):
    folder = tmp_path / "inbox" / "batch_date=2026-12-01"
    (folder / "source_id=lab").mkdir(parents=True)
    ids = ["lot-1", "lot-2", "lot-3", "lot-4"]
    pq.write_table(pa.table({"item_id": ids, "test_weight_kg_hl": [72.0, 76.0, 78.0, 81.0]}), folder / "items.parquet")
    pq.write_table(pa.table({"item_id": ids, "label": ["feed", "milling", "milling", "premium"]}), folder / "source_id=lab" / "g.parquet")
    config = tmp_path / "c.yaml"
    config.write_text(yaml.safe_dump({
        "rule_class": {"kind": "constant"}, "mechanism": mechanism, "classes": GRADES, "sources": [{"source_id": "lab", "weight": 1.0}],
    }))
    return tmp_path / "inbox", config


def test_a_constant_k4_night_names_classes_in_decision_and_report(tmp_path):
    inbox, config = _constant_night(tmp_path)
    out = tmp_path / "out"
    result = cli("screen", "--inbox", str(inbox), "--date", "2026-12-01", "--config", str(config), "--out", str(out))
    assert result.returncode == 0, result.stderr
    decision = json.loads((out / "batch_date=2026-12-01" / "decision.json").read_text())
    assert decision["classes"] == GRADES
    # one source labelling feed, milling, milling, premium: the best constant is milling (2), wrong on 2 of 4 lots
    assert decision["consensus"] == {"rule": {"kind": "constant", "label": 2}, "risk": 0.5}
    assert decision["rule_class"]["size"] == 4  # K constant rules
    assert "milling (2) for every lot" in result.stdout
    assert "milling (2) for every lot" in (out / "batch_date=2026-12-01" / "report.html").read_text()


@pytest.mark.parametrize("code", ["unknown_class_name", "class_index_out_of_range", "rule_class_out_of_range"])
def test_every_k_class_input_error_has_a_fix(code):
    from truthsieve.pipeline.evidence import fix_for
    from truthsieve.pipeline.records import CODE_OF_FORMER

    assert CODE_OF_FORMER.get(code, code) == code  # no former code: the record's code is the rule
    assert "class" in fix_for(code) and fix_for(code) != fix_for("no_such_code")


def test_a_listed_k4_night_reads_integer_rule_columns_through_the_command_line(tmp_path):
    inbox, config = _constant_night(tmp_path)
    items = inbox / "batch_date=2026-12-01" / "items.parquet"
    table = pq.read_table(items)
    table = table.append_column("rule__heavy", pa.array([1, 2, 2, 3], pa.int8())).append_column("rule__all_reject", pa.array([0, 0, 0, 0], pa.int8()))
    pq.write_table(table, items)
    config.write_text(config.read_text().replace("kind: constant", "kind: listed"))
    out = tmp_path / "out"
    result = cli("screen", "--inbox", str(inbox), "--date", "2026-12-01", "--config", str(config), "--out", str(out))
    assert result.returncode == 0, result.stderr
    decision = json.loads((out / "batch_date=2026-12-01" / "decision.json").read_text())
    # rule__heavy gives feed, milling, milling, premium: exactly the lab's labels, risk 0
    assert decision["errors"] == [] and decision["consensus"] == {"rule": {"kind": "listed", "name": "heavy"}, "risk": 0.0}
