"""The compose file's structure (no Docker engine runs here, so it is checked, not started)."""

from __future__ import annotations

import yaml

from conftest import REPO


def test_compose_runs_celery_with_shared_storage_and_no_secrets():
    compose = yaml.safe_load((REPO / "docker" / "compose.yaml").read_text())
    services = compose["services"]
    for name in ("postgres", "redis", "scheduler", "api-server", "dag-processor", "worker-1", "worker-2"):
        assert name in services, name
    airflow_services = [s for s in services.values() if "build" in s]
    for service in airflow_services:
        env = service["environment"]
        assert env["AIRFLOW__CORE__EXECUTOR"] == "CeleryExecutor"
        assert env["AIRFLOW__DATABASE__SQL_ALCHEMY_CONN"].startswith("postgresql")
        assert env["AIRFLOW__CELERY__BROKER_URL"].startswith("redis://")
        assert "truthsieve-data:/data/truthsieve" in service["volumes"]
        assert env["TRUTHSIEVE_DRAW_KEY"].startswith("${")  # taken from the environment, not stored
    assert [s["command"][:2] for n, s in services.items() if n.startswith("worker")] == [["airflow", "celery"]] * 2
    dockerfile = (REPO / "docker" / "Dockerfile").read_text()
    assert "requirements.lock" in dockerfile and "FROM python:3.11" in dockerfile
