"""Redis, PostgreSQL and the compose file's Airflow services, for the live Celery test.

``docker/compose.yaml`` is the one source of truth for the services' commands and
environment: :func:`compose_services` reads it and fills its ``${VAR}``,
``${VAR:-default}`` and ``${VAR:?message}`` variables the way Compose does, from the
mapping the test passes (its own addresses, ports, folders and test-only secrets).

:func:`redis_server` and :func:`postgres_server` start the Debian packages' servers on
127.0.0.1 on free ports, wait (bounded) until they answer, and on exit stop them by PID
and remove their data folders. As root, PostgreSQL runs as the ``postgres`` user (it refuses
root): its data and socket folders are then made in the system temporary folder (pytest's
folders are private to root) and chowned to it.
"""

from __future__ import annotations

import contextlib
import glob
import os
import re
import shlex
import shutil
import signal
import socket
import subprocess
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import yaml

from live_stack import free_port, wait_for

REPO = Path(__file__).resolve().parents[2]
COMPOSE = REPO / "docker" / "compose.yaml"
_VARIABLE = re.compile(r"\$\{([A-Za-z_][A-Za-z0-9_]*)(?:(:-|:\?)([^}]*))?\}")


def interpolate(text: str, variables: dict[str, str]) -> str:
    """Compose's interpolation: ``${V}`` (V must be given), ``${V:-d}``, ``${V:?msg}``."""

    def one(match: re.Match) -> str:
        name, kind, rest = match.groups()
        value = variables.get(name, "")
        if value:
            return value
        if kind == ":-":
            return rest
        raise KeyError(f"{COMPOSE.name}: {name} is not set ({rest or 'required'})")

    return _VARIABLE.sub(one, str(text))


@dataclass(frozen=True)
class Service:
    command: tuple[str, ...]
    environment: dict[str, str]


def compose_services(variables: dict[str, str], path: Path = COMPOSE) -> dict[str, Service]:
    """Every Airflow service (those built from the Dockerfile) with its command and
    environment interpolated from ``variables``."""
    services = yaml.safe_load(path.read_text())["services"]
    return {
        name: Service(
            command=tuple(interpolate(part, variables) for part in spec["command"]),
            environment={key: interpolate(value, variables) for key, value in spec["environment"].items()},
        )
        for name, spec in services.items()
        if "build" in spec
    }


def debian_binaries() -> tuple[dict[str, str], str]:
    """The servers' paths, and why the test cannot run (empty when it can)."""
    initdbs = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"), key=lambda p: int(Path(p).parts[-3]))
    found = {"redis-server": shutil.which("redis-server") or ""}
    if initdbs:
        bindir = Path(initdbs[-1]).parent
        found |= {"initdb": str(bindir / "initdb"), "pg_ctl": str(bindir / "pg_ctl")}
    missing = [name for name in ("redis-server", "initdb") if not found.get(name)]
    if os.geteuid() == 0 and not missing:
        try:
            import pwd

            pwd.getpwnam("postgres")
        except KeyError:
            missing.append("the postgres user")
    reason = f"not installed: {', '.join(missing)} (apt-get install redis-server postgresql)" if missing else ""
    return found, reason


def _answers(port: int) -> bool:
    with socket.create_connection(("127.0.0.1", port), timeout=2) as connection:
        connection.sendall(b"PING\r\n")
        return connection.recv(16).startswith(b"+PONG")


@contextlib.contextmanager
def redis_server(binary: str, root: Path, timeout: float = 60) -> Iterator[int]:
    """A Redis on 127.0.0.1 (no persistence) under ``root``; yields its port."""
    folder, port = root / "redis-data", free_port()
    folder.mkdir(parents=True)
    log = open(root / "redis.log", "w")
    argv = [binary, "--port", str(port), "--bind", "127.0.0.1", "--dir", str(folder), "--daemonize", "no", "--save", "", "--appendonly", "no"]
    process = subprocess.Popen(argv, stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
    log.close()
    try:
        wait_for(lambda: process.poll() is None and _answers(port), timeout, f"Redis on port {port}")
        yield port
    finally:
        _stop_pid(process.pid, process)
        shutil.rmtree(folder, ignore_errors=True)


def _as_postgres(argv: list[str], timeout: float) -> subprocess.CompletedProcess:
    if os.geteuid() == 0:
        argv = ["su", "postgres", "-s", "/bin/sh", "-c", " ".join(shlex.quote(a) for a in argv)]
    result = subprocess.run(argv, capture_output=True, text=True, timeout=timeout)
    assert result.returncode == 0, (argv, result.stdout[-2000:], result.stderr[-2000:])
    return result


@contextlib.contextmanager
def postgres_server(binaries: dict[str, str], root: Path, timeout: float = 120) -> Iterator[int]:
    """A PostgreSQL on 127.0.0.1 with user/password/database ``airflow``; yields its port."""
    as_root = os.geteuid() == 0
    base = Path(tempfile.mkdtemp(prefix="truthsieve-pg-")) if as_root else root / "postgres"
    data, sockets = base / "data", base / "sockets"
    port = free_port()
    started = False
    try:
        for folder in (data, sockets):
            folder.mkdir(parents=True)
        if as_root:
            import pwd

            user = pwd.getpwnam("postgres")
            for folder in (base, data, sockets):
                os.chown(folder, user.pw_uid, user.pw_gid)
        data.chmod(0o700)
        _as_postgres([binaries["initdb"], "-D", str(data), "-U", "postgres", "--auth=trust", "-E", "UTF8"], timeout)
        options = f"-p {port} -k {sockets} -c listen_addresses=127.0.0.1"
        started = True
        _as_postgres([binaries["pg_ctl"], "-D", str(data), "-l", str(base / "postgres.log"), "-o", options, "-w", "-t", str(int(timeout)), "start"], timeout + 10)
        import psycopg2

        connection = psycopg2.connect(host="127.0.0.1", port=port, user="postgres", dbname="postgres", connect_timeout=10)
        connection.autocommit = True
        with connection.cursor() as cursor:
            cursor.execute("CREATE USER airflow PASSWORD 'airflow'")
            cursor.execute("CREATE DATABASE airflow OWNER airflow")
        connection.close()
        yield port
    finally:
        if started:
            pid_file = data / "postmaster.pid"
            pid = int(pid_file.read_text().split()[0]) if pid_file.exists() else None
            with contextlib.suppress(AssertionError, subprocess.TimeoutExpired):
                _as_postgres([binaries["pg_ctl"], "-D", str(data), "-m", "fast", "-w", "-t", "60", "stop"], 70)
            if pid is not None:
                _stop_pid(pid)
        shutil.rmtree(base, ignore_errors=True)


def _alive(pid: int, process: subprocess.Popen | None) -> bool:
    if process is not None:
        return process.poll() is None
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    return True


def _stop_pid(pid: int, process: subprocess.Popen | None = None, timeout: float = 30) -> None:
    """SIGTERM ``pid``, wait (bounded) until it is gone, SIGKILL if it is not."""
    with contextlib.suppress(ProcessLookupError):
        os.kill(pid, signal.SIGTERM)
    try:
        wait_for(lambda: not _alive(pid, process), timeout, f"process {pid} to exit", interval=0.2)
    except AssertionError:
        with contextlib.suppress(ProcessLookupError):
            os.kill(pid, signal.SIGKILL)
        wait_for(lambda: not _alive(pid, process), timeout, f"process {pid} to exit after SIGKILL", interval=0.2)
