"""A four-class night through the nightly DAG (dag.test() on SQLite) gives the command line's decision, byte for byte."""

from __future__ import annotations

import json
import shutil
import sys

import pytest
import yaml

from conftest import REPO
from test_dag import DATE, _run_dag

pytestmark = pytest.mark.airflow


def test_a_grades_night_through_the_dag_matches_the_cli(airflow_db, tmp_path, monkeypatch):
    sys.path.insert(0, str(REPO / "tests" / "pipeline"))
    from inboxes import cli
    from truthsieve.pipeline import demo_grades

    monkeypatch.delenv("AIRFLOW_CONN_SMTP_DEFAULT", raising=False)
    generated = tmp_path / "generated"
    night3 = demo_grades.generate_inbox(generated)[2]  # the first night farm-alder bends its grades
    inbox = tmp_path / "inbox"
    shutil.copytree(generated / f"batch_date={night3}", inbox / f"batch_date={DATE}")  # the DAG test's logical date
    config = tmp_path / "grades.yaml"
    config.write_text(yaml.safe_dump(demo_grades.demo_config_dict()))

    run = _run_dag(inbox, tmp_path / "airflow-out", config, send_mail=False)
    assert run.state == "success", run.state
    assert cli("screen", "--inbox", str(inbox), "--date", DATE, "--config", str(config), "--out", str(tmp_path / "cli-out")).returncode == 0
    from_dag = (tmp_path / "airflow-out" / f"batch_date={DATE}" / "decision.json").read_bytes()
    assert from_dag == (tmp_path / "cli-out" / f"batch_date={DATE}" / "decision.json").read_bytes()
    decision = json.loads(from_dag)
    assert decision["classes"] == list(demo_grades.CLASSES) and decision["errors"] == []
    assert {"above", "below"} <= set(decision["draw"]["rule"])
