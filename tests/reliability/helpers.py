"""Shared pieces of the reliability suite: a gunicorn on a free loopback port, tokens, demo data.

Everything binds 127.0.0.1 only, every wait is bounded, and every process started here is stopped
by its own pid.
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
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import requests
from alembic import command
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session

from service.auth import new_token, token_hash
from service.demo import SAMPLE_DATA, load_demo
from service.health import alembic_config
from service.persistence import repository as repo

ROOT = Path(__file__).resolve().parents[2]
VENV_BIN = Path(sys.executable).parent
GUNICORN_CONF = ROOT / "service" / "gunicorn_conf.py"
HERE = Path(__file__).resolve().parent
HOST = "127.0.0.1"


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind((HOST, 0))
        return sock.getsockname()[1]


def migrate(url: str) -> None:
    command.upgrade(alembic_config(url), "head")


def load_demo_network(url: str) -> None:
    engine = create_engine(url)
    try:
        with Session(engine) as session:
            load_demo(session, SAMPLE_DATA, "L")
            session.commit()
    finally:
        engine.dispose()


def add_tokens(url: str, prefix: str = "rel") -> dict[str, str]:
    """One token per role, written straight into the database (plaintext returned, hash stored)."""
    engine = create_engine(url)
    out = {}
    try:
        with Session(engine) as session:
            for role in ("viewer", "dispatcher", "admin"):
                token = new_token()
                repo.add_token(session, f"{prefix}-{role}-{os.getpid()}-{time.monotonic_ns()}", role, token_hash(token))
                out[role] = token
            session.commit()
    finally:
        engine.dispose()
    return out


def bearer(token: str, **extra: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}", **extra}


@contextlib.contextmanager
def fresh_pg_database(base_url: str, name: str) -> Iterator[str]:
    """A database of our own next to ``base_url`` (the server is shared), dropped afterwards."""
    base = make_url(base_url)
    own = base.set(database=name)
    admin = create_engine(base, isolation_level="AUTOCOMMIT")
    try:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
            conn.execute(text(f'CREATE DATABASE "{name}"'))
        yield own.render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


def worker_pids(master_pid: int) -> list[int]:
    """The gunicorn master's children (the workers), from /proc."""
    pids = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        # pid (comm) state ppid ...
        ppid = int(stat.rsplit(")", 1)[1].split()[1])
        if ppid == master_pid:
            pids.append(int(entry.name))
    return sorted(pids)


def connections_per_worker(master_pid: int, port: int) -> dict[int, int]:
    """Established connections on ``port`` held by each worker (from /proc/net/tcp and the fds).

    Also used by benchmarks/load.py, which prints where each slice's connections landed.
    """
    established: set[str] = set()
    for table in ("/proc/net/tcp", "/proc/net/tcp6"):
        with contextlib.suppress(OSError):
            for line in Path(table).read_text().splitlines()[1:]:
                fields = line.split()
                # local address "HEX_IP:HEX_PORT", state 01 = ESTABLISHED, inode in column 10
                if int(fields[1].rsplit(":", 1)[1], 16) == port and fields[3] == "01":
                    established.add(fields[9])
    counts = {}
    for pid in worker_pids(master_pid):
        held = 0
        with contextlib.suppress(OSError):
            for fd in Path(f"/proc/{pid}/fd").iterdir():
                with contextlib.suppress(OSError):
                    target = os.readlink(fd)
                    held += target.startswith("socket:[") and target[8:-1] in established
        counts[pid] = held
    return counts


@dataclass
class Server:
    """A gunicorn master we started; stderr (the JSON log) goes to ``log_path``."""

    process: subprocess.Popen
    port: int
    log_path: Path
    env: dict[str, str] = field(default_factory=dict)

    @property
    def base(self) -> str:
        return f"http://{HOST}:{self.port}"

    def url(self, path: str) -> str:
        return self.base + path

    def log(self) -> str:
        return self.log_path.read_text(errors="replace") if self.log_path.exists() else ""

    def log_lines(self) -> list[dict]:
        out = []
        for line in self.log().splitlines():
            line = line.strip()
            if line.startswith("{"):
                with contextlib.suppress(ValueError):
                    out.append(json.loads(line))
        return out

    def worker_pids(self) -> list[int]:
        return worker_pids(self.process.pid)

    def connections_per_worker(self) -> dict[int, int]:
        return connections_per_worker(self.process.pid, self.port)

    def wait_workers(self, count: int, timeout: float = 15.0) -> list[int]:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            pids = self.worker_pids()
            if len(pids) >= count:
                return pids
            time.sleep(0.05)
        raise AssertionError(f"gunicorn did not reach {count} workers; log:\n{self.log()[-3000:]}")

    def stop(self, sig: int = signal.SIGTERM, timeout: float = 25.0) -> int:
        if self.process.poll() is None:
            self.process.send_signal(sig)
            try:
                self.process.wait(timeout)
            except subprocess.TimeoutExpired:
                self.process.kill()
                self.process.wait(5)
        return self.process.returncode


def start_gunicorn(
    database_url: str,
    tmp_path: Path,
    *,
    workers: int = 2,
    threads: int = 4,
    extra_env: dict[str, str] | None = None,
    wait_path: str = "/livez",
    timeout: float = 20.0,
    app: str = "service.app:create_app()",
    bounds_lifted: bool = True,
) -> Server:
    """Start gunicorn with the project's config on a free loopback port; wait until it answers.

    ``app`` is gunicorn's app spec; a module of this directory (``slow_plan_app:create_app()``)
    needs :data:`HERE` on ``PYTHONPATH`` in ``extra_env``.

    Unless ``bounds_lifted`` is false, the per-token limits are off and every thread may wait for
    a planning process (service.bounded): the tests that do not test those bounds (concurrency,
    faults, security…) send bursts no client of the service would. test_bounded_load.py keeps them.
    """
    port = free_port()
    log_path = tmp_path / f"gunicorn-{port}.log"
    env = {k: v for k, v in os.environ.items() if k not in ("DATABASE_URL", "PROMETHEUS_MULTIPROC_DIR")}
    env.update(
        {
            "DATABASE_URL": database_url,
            "WEB_CONCURRENCY": str(workers),
            "ULLAGE_THREADS": str(threads),
            "ULLAGE_SECRET_KEY": "reliability-suite-secret",
            "ULLAGE_METRICS_DIR": str(tmp_path / f"prom-{port}"),
            "PYTHONUNBUFFERED": "1",
        }
    )
    if bounds_lifted:
        env.update(
            {"ULLAGE_PLANNING_PER_MINUTE": "0", "ULLAGE_HEAVY_READS_PER_MINUTE": "0", "ULLAGE_PLAN_QUEUE": str(threads)}
        )
    env.update(extra_env or {})
    handle = open(log_path, "wb")  # noqa: SIM115 - owned by the child for its lifetime
    process = subprocess.Popen(
        [
            str(VENV_BIN / "gunicorn"),
            "--config",
            str(GUNICORN_CONF),
            "--bind",
            f"{HOST}:{port}",
            app,
        ],
        cwd=str(tmp_path),
        env=env,
        stdout=handle,
        stderr=subprocess.STDOUT,
    )
    handle.close()
    server = Server(process, port, log_path, env)
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise AssertionError(f"gunicorn exited with {process.returncode}:\n{server.log()[-3000:]}")
        try:
            if requests.get(server.url(wait_path), timeout=1).status_code < 600:
                server.wait_workers(workers)
                return server
        except requests.RequestException:
            time.sleep(0.1)
    server.stop(signal.SIGKILL)
    raise AssertionError(f"gunicorn did not answer within {timeout}s:\n{server.log()[-3000:]}")


def run_cli(database_url: str, *args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    env = {**os.environ, "DATABASE_URL": database_url}
    return subprocess.run(
        [str(VENV_BIN / "ullage"), *args], env=env, cwd=cwd, capture_output=True, text=True, timeout=60, check=False
    )
