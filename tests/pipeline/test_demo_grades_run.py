"""``truthsieve demo --scenario grades`` end to end through the real command line.

The claims checked come from the story in pipeline/demo_grades.py's docstring, restated here:
seven nights from 2026-12-07; ``farm-alder`` grades honestly on nights 1-2 and from night 3
calls feed lots just below the 75.0 kg/hl boundary milling; on night 5 ``farm-elm``'s file
misspells a class name on row 12; the class names are reject, feed, milling, premium.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from inboxes import cli
from truthsieve.pipeline.class_colours import class_colours

CLASSES = ["reject", "feed", "milling", "premium"]
DATES = [f"2026-12-{d:02d}" for d in range(7, 14)]
STRATEGIC, STRATEGIC_FROM = "farm-alder", 3


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    root = tmp_path_factory.mktemp("grades")
    result = cli("demo", "--scenario", "grades", "--out", str(root / "out"), cwd=root)
    assert result.returncode == 0, result.stderr
    out = root / "out"
    decisions = {d: json.loads((out / f"batch_date={d}" / "decision.json").read_text()) for d in DATES}
    return out, decisions, result.stdout


def _source(decision: dict, source_id: str) -> dict:
    return next(s for s in decision["sources"] if s["source_id"] == source_id)


def test_seven_nights_named_classes_and_k_class_rules(run):
    out, decisions, stdout = run
    assert sorted(p.name for p in out.glob("batch_date=*")) == [f"batch_date={d}" for d in DATES]
    for decision in decisions.values():
        assert decision["classes"] == CLASSES
        rules = [decision["consensus"]["rule"], decision["draw"]["rule"]] + [e["rule"] for e in decision["mechanism"]["lottery"]]
        for rule in rules:
            assert rule["kind"] == "threshold" and rule["above"] != rule["below"] and {rule["above"], rule["below"]} <= {0, 1, 2, 3}
    in_force = json.loads((out / "in_force.json").read_text())["rule"]
    assert in_force["kind"] == "threshold" and {"above", "below"} <= set(in_force)
    # a rule no binary decision could hold: it names a class beyond 0/1
    assert max(in_force["above"], in_force["below"]) >= 2
    # the summary names the classes beside their indices
    assert any(f"{CLASSES[k]} ({k})" in stdout for k in (2, 3))


def test_the_misspelt_class_name_is_quarantined(run):
    _, decisions, _ = run
    night5 = decisions[DATES[4]]
    assert [(e["file"], e["row"], e["column"], e["rule"]) for e in night5["errors"]] == [
        (f"batch_date={DATES[4]}/source_id=farm-elm/grades.parquet", 12, "label", "unknown_class_name")
    ]
    assert {"source_id": "farm-elm", "why": "quarantined"} in night5["absent"]


def test_the_strategic_member_is_caught_from_night_3_and_only_it(run):
    _, decisions, _ = run
    honest_nights = [decisions[d] for d in DATES[: STRATEGIC_FROM - 1]]
    bent_nights = [decisions[d] for d in DATES[STRATEGIC_FROM - 1 :]]
    for decision in honest_nights:  # before the bending nobody moves the fit
        assert all(s["pull"] == 0 and "pulls_fit" not in s["flags"] for s in decision["sources"])
    caught = [d for d in bent_nights if "pulls_fit" in _source(d, STRATEGIC)["flags"]]
    assert len(caught) >= len(bent_nights) // 2 + 1, [d["batch_date"] for d in caught]
    for decision in caught:  # on those nights its pull is the largest of all
        top = max(decision["sources"], key=lambda s: s["pull"])
        assert top["source_id"] == STRATEGIC
    for decision in decisions.values():  # no honest grader is ever flagged for pulling
        assert all("pulls_fit" not in s["flags"] for s in decision["sources"] if s["source_id"] != STRATEGIC)
    total = {}
    for decision in bent_nights:
        for s in decision["sources"]:
            total[s["source_id"]] = total.get(s["source_id"], 0.0) + s["pull"]
    assert max(total, key=total.get) == STRATEGIC


def test_the_report_plots_k_colours_with_every_class_named(run):
    out, _, _ = run
    html = (out / f"batch_date={DATES[2]}" / "report.html").read_text()
    for k, (name, colour) in enumerate(zip(CLASSES, class_colours(4))):
        assert f"class-legend'>{name} ({k})</text>" in html
        assert f"fill='{colour}'" in html
    assert "share of sources accepting" not in html  # the binary plot's axis is not used for four classes
    index = (out / "index.html").read_text()
    assert "milling (2)" in index


def test_the_grain_demo_keeps_its_default_out_folder_and_grades_has_its_own():
    from truthsieve.pipeline import demo

    assert demo.DEFAULT_OUT == {"grain": Path("out/demo"), "grades": Path("out/grades")}
    assert demo.scenario("grades").night_dates() == DATES


def test_an_unknown_scenario_is_one_line_exit_2(tmp_path):
    result = cli("demo", "--scenario", "wheat", "--out", str(tmp_path / "out"))
    assert result.returncode == 2 and len(result.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "out").exists()


def test_in_force_names_the_classes_of_the_night_that_set_the_rule(run):
    out, _, _ = run
    state = json.loads((out / "in_force.json").read_text())
    result = cli("in-force", "--out", str(out), cwd=out.parent)
    assert result.returncode == 0, result.stderr
    rule = state["rule"]
    # both sides of the rule in force are named, e.g. "reject (0)" and "milling (2)"
    for k in (rule["above"], rule["below"]):
        assert f"{CLASSES[k]} ({k})" in result.stdout
    assert "class " not in result.stdout  # the unnamed fallback is not used
