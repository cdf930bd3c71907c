"""One reusable live Airflow stack for tests: api-server, scheduler, dag-processor.

Each stack gets its own ``AIRFLOW_HOME`` (SQLite), its own API port, short retry delays
(Airflow's default 5 minutes would outlast any test) and bounded waits only::

    with live_stack(tmp_path, extra_env={...}, before_services=queue_backfill) as stack:
        stack.api("PATCH", f"/api/v2/dags/{dag_id}", {"is_paused": False})
        runs = stack.wait_for(lambda: finished_runs(stack), timeout=300, what="three runs")

``stack.base_url`` is the API server (``http://127.0.0.1:<port>``), ``stack.env`` the
environment every component runs with (pass it to further ``airflow`` commands),
``stack.api(method, path, body=None)`` a JSON REST call with a bearer token from
``POST /auth/token`` (simple auth manager, admin password from the generated file),
``stack.airflow(*args)`` one CLI call, ``stack.log(name)`` a component's log tail. On exit
every component is stopped through its own process group (SIGTERM, then SIGKILL after a
bounded wait); nothing else is touched.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
AIRFLOW = str(Path(sys.executable).with_name("airflow"))
COMPONENTS = ("api-server", "scheduler", "dag-processor")


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


class _Dead(AssertionError):
    """A stack component exited: no point waiting any longer."""


def wait_for(condition: Callable[[], object], timeout: float, what: str, interval: float = 0.5, detail: Callable[[], str] = str):
    """Poll ``condition`` until it returns something truthy (returned) or ``timeout`` seconds
    pass (AssertionError naming ``what``). Exceptions inside ``condition`` count as not yet."""
    deadline = time.monotonic() + timeout
    last_error = None
    while True:
        try:
            value = condition()
            if value:
                return value
        except _Dead:
            raise
        except Exception as error:  # noqa: BLE001 - a service that is not up yet
            last_error = error
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out after {timeout:.0f} s waiting for {what} (last error: {last_error!r})\n{detail()}")
        time.sleep(interval)


@dataclass
class LiveStack:
    home: Path
    base_url: str
    env: dict[str, str]
    logs: Path
    processes: dict[str, subprocess.Popen] = field(default_factory=dict)
    _token: str | None = None

    def airflow(self, *args: str, timeout: float = 300, check: bool = True) -> subprocess.CompletedProcess:
        """One ``airflow`` CLI call with the stack's environment."""
        result = subprocess.run([AIRFLOW, *args], env=self.env, capture_output=True, text=True, timeout=timeout)
        if check:
            assert result.returncode == 0, (args, result.stderr[-3000:])
        return result

    def log(self, name: str, chars: int = 3000) -> str:
        path = self.logs / f"{name}.log"
        return path.read_text(errors="replace")[-chars:] if path.exists() else ""

    def logs_tail(self) -> str:
        return "\n".join(f"--- {name} ---\n{self.log(name)}" for name in self.processes)

    def token(self) -> str:
        if self._token is None:
            passwords = json.loads((self.home / "simple_auth_manager_passwords.json.generated").read_text())
            reply = self._request("POST", "/auth/token", {"username": "admin", "password": passwords["admin"]}, auth=False)
            self._token = reply["access_token"]
        return self._token

    def api(self, method: str, path: str, body: dict | None = None, timeout: float = 30):
        """A JSON call to the REST API (``path`` like ``/api/v2/dags``), with token auth."""
        return self._request(method, path, body, auth=True, timeout=timeout)

    def _request(self, method: str, path: str, body, auth: bool, timeout: float = 30):
        headers = {"Content-Type": "application/json", "Accept": "application/json"}
        if auth:
            headers["Authorization"] = f"Bearer {self.token()}"
        data = None if body is None else json.dumps(body).encode()
        request = urllib.request.Request(self.base_url + path, data=data, headers=headers, method=method)
        with urllib.request.urlopen(request, timeout=timeout) as response:
            text = response.read().decode()
        return json.loads(text) if text else None

    def healthy(self) -> bool:
        with urllib.request.urlopen(self.base_url + "/api/v2/monitor/health", timeout=5) as response:
            return response.status == 200

    def wait_for(self, condition: Callable[[], object], timeout: float, what: str, interval: float = 1.0):
        """Like :func:`wait_for`, failing at once (with logs) if a component has died."""

        def alive_and(condition=condition):
            dead = [name for name, process in self.processes.items() if process.poll() is not None]
            if dead:
                raise _Dead(f"{', '.join(dead)} exited while waiting for {what}\n{self.logs_tail()}")
            return condition()

        return wait_for(alive_and, timeout, what, interval, detail=self.logs_tail)

    def start(self, name: str, *args: str) -> subprocess.Popen:
        handle = open(self.logs / f"{name}.log", "w")
        process = subprocess.Popen(
            [AIRFLOW, name, *args], env=self.env, stdout=handle, stderr=subprocess.STDOUT, start_new_session=True
        )
        handle.close()
        self.processes[name] = process
        return process

    def stop(self, timeout: float = 30) -> None:
        """Stop every component by its own process group: SIGTERM, bounded wait, SIGKILL."""
        for process in self.processes.values():
            with contextlib.suppress(ProcessLookupError):
                os.killpg(process.pid, signal.SIGTERM)
        for process in self.processes.values():
            try:
                process.wait(timeout=timeout)
            except subprocess.TimeoutExpired:
                with contextlib.suppress(ProcessLookupError):
                    os.killpg(process.pid, signal.SIGKILL)
                process.wait(timeout=timeout)
            with contextlib.suppress(ProcessLookupError):
                os.killpg(process.pid, signal.SIGKILL)  # workers left in the group


def stack_env(home: Path, port: int, extra_env: dict[str, str] | None = None, retry_delay_s: int = 2) -> dict[str, str]:
    return {
        **os.environ,
        "AIRFLOW_HOME": str(home),
        "AIRFLOW__DATABASE__SQL_ALCHEMY_CONN": f"sqlite:///{home}/airflow.db",
        "AIRFLOW__CORE__DAGS_FOLDER": str(REPO / "dags"),
        "AIRFLOW__CORE__LOAD_EXAMPLES": "False",
        "AIRFLOW__CORE__UNIT_TEST_MODE": "False",
        "AIRFLOW__CORE__PARALLELISM": "4",
        "AIRFLOW__API__PORT": str(port),
        "AIRFLOW__CORE__EXECUTION_API_SERVER_URL": f"http://127.0.0.1:{port}/execution/",
        "AIRFLOW__API_AUTH__JWT_SECRET": f"live-stack-test-secret-{port}",
        "AIRFLOW__SCHEDULER__SCHEDULER_HEARTBEAT_SEC": "1",
        "AIRFLOW__DAG_PROCESSOR__REFRESH_INTERVAL": "5",
        # Short retries: a task that started a moment too early is retried in seconds, not minutes.
        "AIRFLOW__CORE__DEFAULT_TASK_RETRY_DELAY": str(retry_delay_s),
        "TRUTHSIEVE_RETRY_DELAY_S": str(retry_delay_s),  # the nightly DAG's own default_args
        **(extra_env or {}),
    }


@contextlib.contextmanager
def live_stack(
    root: Path,
    *,
    extra_env: dict[str, str] | None = None,
    before_services: Callable[[LiveStack], None] | None = None,
    components: tuple[str, ...] = COMPONENTS,
    health_timeout: float = 240,
    retry_delay_s: int = 2,
) -> Iterator[LiveStack]:
    """A running stack under ``root`` (its home, logs and DB), stopped on exit.

    Order: ``db migrate``; ``before_services(stack)`` (e.g. reserialize, unpause, queue a
    backfill while SQLite has a single writer); the API server, polled on
    ``GET /api/v2/monitor/health`` for at most ``health_timeout`` seconds; then the other
    components. Tasks therefore never start before the execution API answers.
    """
    home, logs = root / "airflow-home", root / "airflow-logs"
    home.mkdir(parents=True, exist_ok=True)
    logs.mkdir(parents=True, exist_ok=True)
    port = free_port()
    stack = LiveStack(home=home, base_url=f"http://127.0.0.1:{port}", env=stack_env(home, port, extra_env, retry_delay_s), logs=logs)
    stack.airflow("db", "migrate")
    if before_services is not None:
        before_services(stack)
    try:
        if "api-server" in components:
            stack.start("api-server", "--port", str(port))
            stack.wait_for(stack.healthy, health_timeout, "the API server's health endpoint")
        for name in components:
            if name != "api-server":
                stack.start(name)
        yield stack
    finally:
        stack.stop()
