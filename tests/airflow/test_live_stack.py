"""The reusable live stack itself: all three components, health first, token-authenticated REST."""

from __future__ import annotations

import pytest

from live_stack import live_stack

pytestmark = [pytest.mark.airflow, pytest.mark.slow]


def test_full_stack_parses_the_dag_and_answers_authenticated_rest_calls(tmp_path):
    with live_stack(tmp_path) as stack:
        assert stack.healthy()
        assert set(stack.processes) == {"api-server", "scheduler", "dag-processor"}
        # The dag-processor (refresh interval 5 s) serializes the DAG folder by itself.
        dag = stack.wait_for(lambda: stack.api("GET", "/api/v2/dags/truthsieve_nightly"), timeout=240, what="the DAG to be parsed")
        assert dag["dag_id"] == "truthsieve_nightly" and dag["is_paused"] is True
        assert stack.api("PATCH", "/api/v2/dags/truthsieve_nightly", {"is_paused": False})["is_paused"] is False
        pids = [p.pid for p in stack.processes.values()]
    assert all(stack.processes[name].poll() is not None for name in stack.processes), pids
