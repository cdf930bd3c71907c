"""The nightly DAG on CeleryExecutor: real Redis broker, real Postgres metadata DB, two workers.

The Airflow services run the commands and environment of ``docker/compose.yaml`` (read,
not copied), on 127.0.0.1. Two nights run through the DAG in date order; mapped tasks
must have run on both workers, and every ``decision.json`` must equal the CLI's byte for byte.
"""

from __future__ import annotations

import json
import os
import sys
import time

import pytest

from celery_services import compose_services, debian_binaries, interpolate, postgres_server, redis_server
from conftest import REPO
from live_stack import free_port, live_stack

DATES = ["2026-11-02", "2026-11-03"]
DAG_ID = "truthsieve_nightly"
WORKERS = ("worker-1", "worker-2")
DRAW_KEY = "live-celery-test-draw-key-not-secret"


def test_interpolation_follows_compose_rules():
    assert interpolate("a${X}b", {"X": "1"}) == "a1b"
    assert interpolate("${X:-d}", {}) == "d"
    assert interpolate("${X:-d}", {"X": ""}) == "d"  # Compose: ":-" also replaces an empty value
    assert interpolate("${X:?set X}", {"X": "v"}) == "v"
    with pytest.raises(KeyError, match="set X"):
        interpolate("${X:?set X}", {})
    with pytest.raises(KeyError, match="X"):
        interpolate("${X}", {})


def test_worker_name_comes_from_the_environment(monkeypatch):
    import socket

    from truthsieve.airflow.hostname import worker_name

    monkeypatch.setenv("TRUTHSIEVE_WORKER_NAME", "w7")
    assert worker_name() == "w7"
    monkeypatch.setenv("TRUTHSIEVE_WORKER_NAME", "  ")
    assert worker_name() == socket.getfqdn()
    monkeypatch.delenv("TRUTHSIEVE_WORKER_NAME")
    assert worker_name() == socket.getfqdn()


def _binaries_or_skip() -> dict[str, str]:
    binaries, reason = debian_binaries()
    if reason:
        if os.environ.get("CI") == "true":
            pytest.fail(f"CI must run the live Celery test, but {reason}; .ci/run installs them")
        print(f"skipping the live Celery test: {reason}")
        pytest.skip(reason)
    return binaries


def _run_state(stack, run_id):
    return stack.api("GET", f"/api/v2/dags/{DAG_ID}/dagRuns/{run_id}")["state"]


def _task_instances(stack, run_id):
    return stack.api("GET", f"/api/v2/dags/{DAG_ID}/dagRuns/{run_id}/taskInstances?limit=200")["task_instances"]


@pytest.mark.airflow
@pytest.mark.slow
def test_two_nights_on_two_celery_workers_match_the_cli(tmp_path):
    binaries = _binaries_or_skip()
    started = time.monotonic()
    sys.path.insert(0, str(REPO / "tests" / "pipeline"))
    from inboxes import cli, write_batch, write_config

    data = tmp_path / "data"  # compose's shared volume: inbox, config, outputs
    data.mkdir()
    inbox, config = data / "inbox", write_config(data / "config.yaml")
    for k, date in enumerate(DATES):
        write_batch(inbox, date, seed=40 + k, bend={"south": 16.0} if k == 1 else None)
    cli_out = tmp_path / "cli-out"
    cli_env = {**os.environ, "TRUTHSIEVE_DRAW_KEY": DRAW_KEY}
    done = cli("backfill", "--inbox", str(inbox), "--from", DATES[0], "--to", DATES[-1], "--config", str(config), "--out", str(cli_out), env=cli_env)
    assert done.returncode == 0, done.stderr

    with redis_server(binaries["redis-server"], tmp_path) as redis_port, postgres_server(binaries, tmp_path) as postgres_port:
        api_port = free_port()
        variables = {
            "POSTGRES_HOST": "127.0.0.1",
            "POSTGRES_PORT": str(postgres_port),
            "REDIS_HOST": "127.0.0.1",
            "REDIS_PORT": str(redis_port),
            "API_HOST": "127.0.0.1",
            "API_PORT": str(api_port),
            "TRUTHSIEVE_DATA": str(data),
            "AIRFLOW__API_AUTH__JWT_SECRET": f"live-celery-test-jwt-secret-{api_port}",
            "TRUTHSIEVE_DRAW_KEY": DRAW_KEY,
            # send_mail is false below: nothing ever connects to this port
            "AIRFLOW_CONN_SMTP_DEFAULT": json.dumps({"conn_type": "smtp", "host": "127.0.0.1", "port": free_port()}),
            "WORKER_1_LOG_PORT": str(free_port()),
            "WORKER_2_LOG_PORT": str(free_port()),
        }
        services = compose_services(variables)
        components = ("api-server", "scheduler", "dag-processor", *WORKERS)
        common = services["scheduler"].environment
        assert all(services[name].command[0] == "airflow" for name in components)

        def prepare(stack):
            assert services["airflow-init"].command[1:] == ("db", "migrate")  # live_stack ran it already
            stack.airflow("dags", "reserialize")
            stack.airflow("dags", "unpause", DAG_ID)

        with live_stack(
            tmp_path,
            extra_env=common,
            before_services=prepare,
            components=components,
            health_timeout=300,
            port=api_port,
            commands={name: services[name].command[1:] for name in components},
            component_env={name: services[name].environment for name in components},
        ) as stack:
            assert stack.env["AIRFLOW__DATABASE__SQL_ALCHEMY_CONN"].startswith("postgresql+psycopg2://")
            # Both workers must have joined the broker before the first night is queued.
            for name in WORKERS:
                stack.wait_for(lambda name=name: " ready." in stack.log(name, 200_000), 240, f"{name} to join the broker", interval=2)
            hosts: dict[str, set[str]] = {}
            for date in DATES:  # drift reads earlier nights: one night after the other
                run_id = f"celery-live-{date}"
                conf = {"inbox": str(inbox), "out": str(data / "out"), "config": str(config), "send_mail": False}
                stack.api("POST", f"/api/v2/dags/{DAG_ID}/dagRuns", {"dag_run_id": run_id, "logical_date": f"{date}T00:00:00Z", "conf": conf})
                state = stack.wait_for(
                    lambda: (s := _run_state(stack, run_id)) in ("success", "failed") and s,
                    900,
                    f"the night {date} to finish",
                    interval=2,
                )
                instances = _task_instances(stack, run_id)
                assert state == "success", [(t["task_id"], t["map_index"], t["state"]) for t in instances]
                for ti in instances:
                    if ti["map_index"] >= 0:
                        hosts.setdefault(ti["task_id"], set()).add(ti["hostname"])
            assert set(hosts) == {"validate_source", "source_incentive"}, hosts
            assert set().union(*hosts.values()) == {"w1", "w2"}, hosts  # both workers ran mapped tasks

    for date in DATES:
        from_airflow = (data / "out" / f"batch_date={date}" / "decision.json").read_bytes()
        assert from_airflow == (cli_out / f"batch_date={date}" / "decision.json").read_bytes(), date
    assert not list(tmp_path.glob("redis-data")) and not list(tmp_path.glob("postgres"))  # data folders removed
    print(f"live Celery test: {time.monotonic() - started:.0f} s")

