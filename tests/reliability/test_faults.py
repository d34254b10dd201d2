"""Faults, and what "nothing lost" means (conventions B.8):

1. every plan POST that got a 2xx is durably present afterwards;
2. a POST that did not get a 2xx is absent or present exactly once (never partial, never twice);
   retrying with the same Idempotency-Key converges to exactly one plan.

Faults: database unreachable at start; PostgreSQL restarted during requests (a throwaway cluster
of our own on 127.0.0.1:55432 — the shared server is never touched); a worker SIGKILLed in the
middle of a plan POST; SIGTERM with a request in flight; a full disk under SQLite
(``PRAGMA max_page_count``).
"""

from __future__ import annotations

import contextlib
import logging
import os
import shutil
import signal
import socket
import sqlite3
import subprocess
import tempfile
import threading
import time
import uuid
from pathlib import Path

import pytest
import requests
from sqlalchemy import create_engine, event, text

from service import auth, create_app
from service.idempotency import LEASE
from service.persistence import db

from .helpers import (
    add_tokens,
    bearer,
    fresh_pg_database,
    load_demo_network,
    migrate,
    start_gunicorn,
)

PG_BIN = Path("/usr/lib/postgresql/15/bin")
TRUCK = "HV-R1"
PLANS = f"/api/v1/trucks/{TRUCK}/plans"


def plan_rows(url: str) -> list[tuple[int, int, int]]:
    """(plan id, plan_sites rows, sites in its inputs) for every plan."""
    engine = create_engine(url)
    try:
        with engine.connect() as conn:
            plans = conn.execute(text("SELECT id, inputs FROM plans ORDER BY id")).all()
            out = []
            for plan_id, inputs in plans:
                if isinstance(inputs, str):
                    import json  # noqa: PLC0415

                    inputs = json.loads(inputs)
                count = conn.execute(
                    text("SELECT count(*) FROM plan_sites WHERE plan_id = :p"), {"p": plan_id}
                ).scalar_one()
                out.append((plan_id, count, len(inputs["sites"])))
            return out
    finally:
        engine.dispose()


def assert_no_partial_plans(url: str) -> list[int]:
    rows = plan_rows(url)
    for plan_id, lines, inputs in rows:
        assert lines == inputs > 0, f"plan {plan_id} is partial: {lines} plan_sites rows for {inputs} input sites"
    return [r[0] for r in rows]


def post_plan(server, token: str, key: str, timeout: float = 10.0) -> requests.Response:
    return requests.post(
        server.url(PLANS), json={}, headers=bearer(token, **{"Idempotency-Key": f'"{key}"'}), timeout=timeout
    )


def converge(server, token: str, key: str, deadline_s: float) -> requests.Response:
    """Retry one key until it is answered 201 (409 'still running' while a dead claim's lease runs)."""
    deadline = time.monotonic() + deadline_s
    while True:
        try:
            response = post_plan(server, token, key)
            if response.status_code == 201:
                return response
            assert response.status_code in (409, 503), response.text
        except requests.ConnectionError:
            pass
        assert time.monotonic() < deadline, f"key {key} did not converge within {deadline_s}s"
        time.sleep(0.25)


def is_problem(response: requests.Response) -> bool:
    return response.headers.get("Content-Type", "").startswith("application/problem+json")


# ------------------------------------------------------------------ database unreachable at start


def test_database_unreachable_at_start(tmp_path):
    url = "postgresql+psycopg://postgres@127.0.0.1:1/ullage"
    server = start_gunicorn(url, tmp_path, workers=2)
    try:
        workers = server.worker_pids()
        assert requests.get(server.url("/livez"), timeout=5).status_code == 200
        ready = requests.get(server.url("/readyz"), timeout=10)
        assert ready.status_code == 503 and is_problem(ready) and ready.headers.get("Retry-After")
        for path in ("/api/v1/sites", "/api/v1/trucks/HV-R1/trips?week=2026-W01"):
            response = requests.get(server.url(path), headers=bearer("ull_" + "x" * 43), timeout=10)
            assert response.status_code == 503, response.text
            assert is_problem(response) and response.headers.get("Retry-After")
            assert response.json()["status"] == 503
        response = requests.post(server.url(PLANS), json={}, headers=bearer("ull_" + "x" * 43), timeout=10)
        assert response.status_code == 503 and is_problem(response)
        time.sleep(2)  # no crash loop: the same workers are still serving
        assert server.process.poll() is None
        assert server.worker_pids() == workers
        assert requests.get(server.url("/livez"), timeout=5).status_code == 200
    finally:
        assert server.stop() == 0
    assert server.log().count("Booting worker") == 2


# ------------------------------------------------------------------ PostgreSQL restarted mid-run


def _port_free(port: int) -> bool:
    with socket.socket() as sock:
        return sock.connect_ex(("127.0.0.1", port)) != 0


def _below_ephemeral_ports() -> range:
    """Ports the kernel never gives a client socket as its local port.

    While the cluster is down, the workers keep reconnecting to its port; a connect from an
    ephemeral port equal to the target port on loopback connects the socket to itself (TCP
    simultaneous open), which then holds the port so that the restart cannot bind it: the likely
    cause of one failed restart in the suite, on port 55432, inside Linux's default 32768–60999.
    """
    low = int(Path("/proc/sys/net/ipv4/ip_local_port_range").read_text().split()[0])
    return range(low - 1000, low)


class OwnPostgres:
    """A throwaway PostgreSQL 15 cluster on loopback, run as the ``postgres`` OS user when we are root."""

    def __init__(self, port: int) -> None:
        self.port = port
        self.base = Path(tempfile.mkdtemp(prefix="ullage-pg-", dir="/tmp"))
        self.data = self.base / "data"
        self.logfile = self.base / "server.log"
        self.as_pg = ["runuser", "-u", "postgres", "--"] if os.geteuid() == 0 else []
        if self.as_pg:
            shutil.chown(self.base, "postgres", "postgres")
        self._run(PG_BIN / "initdb", "-D", str(self.data), "-U", "postgres", "-A", "trust", "--no-sync")

    def _run(self, *args, timeout: float = 60) -> None:  # noqa: ANN002
        result = subprocess.run(
            [*self.as_pg, *map(str, args)], capture_output=True, text=True, timeout=timeout, check=False
        )
        assert result.returncode == 0, f"{args[0]} failed: {result.stdout}\n{result.stderr}"

    def ctl(self, *args: str) -> None:
        self._run(
            PG_BIN / "pg_ctl",
            "-D",
            self.data,
            "-l",
            self.logfile,
            "-w",
            "-t",
            "30",
            "-o",
            f"-p {self.port} -k {self.base} -c listen_addresses=127.0.0.1",
            *args,
        )

    @property
    def url(self) -> str:
        return f"postgresql+psycopg://postgres@127.0.0.1:{self.port}/postgres"

    def remove(self) -> None:
        with contextlib.suppress(AssertionError, subprocess.TimeoutExpired):
            self.ctl("stop", "-m", "immediate")
        shutil.rmtree(self.base, ignore_errors=True)


@pytest.fixture
def own_postgres():
    if not PG_BIN.joinpath("initdb").exists():
        pytest.skip("PostgreSQL 15 server binaries not installed")
    port = next(p for p in _below_ephemeral_ports() if _port_free(p))
    cluster = OwnPostgres(port)
    try:
        cluster.ctl("start")
        yield cluster
    finally:
        cluster.remove()


def _status_and_body(response) -> tuple[int, dict]:  # noqa: ANN001 - requests' or Flask's response
    body = response.json() if isinstance(response, requests.Response) else response.get_json()
    return response.status_code, body


def activate_a_plan(post) -> None:  # noqa: ANN001 - post(path) -> (status, JSON body)
    """Record and activate a plan of TRUCK, so that its weekly trips answer 200."""
    status, body = post(PLANS)
    assert status == 201, body
    assert post(f"/api/v1/plans/{body['id']}/activate")[0] == 200


def test_postgres_down_weekly_trips_and_every_route_answer_503_logged_as_warning(own_postgres, monkeypatch, caplog):
    """PostgreSQL stops while tokens are cached: the weekly trips call, whose change-stamp read
    connects straight through the pool (``db.RawRead``), answered 500 with a traceback at ERROR;
    now it answers 503 problem+json with Retry-After like every other route, logged as a warning,
    and 200 again once the database is back."""
    url = own_postgres.url
    migrate(url)
    load_demo_network(url)
    tokens = add_tokens(url)
    monkeypatch.setattr(auth, "_clock", lambda: 0.0)  # cached tokens stay valid: requests reach the routes
    app = create_app({"DATABASE_URL": url, "TESTING": True, "ULLAGE_TOKEN_CACHE_SECONDS": "5"})
    client = app.test_client()
    viewer = bearer(tokens["viewer"])
    activate_a_plan(lambda path: _status_and_body(client.post(path, json={}, headers=bearer(tokens["dispatcher"]))))
    reads = (
        f"/api/v1/trucks/{TRUCK}/trips?week=2026-W50",
        f"/api/v1/trucks/{TRUCK}/trips?from=2026-12-01&to=2026-12-31",
        "/api/v1/sites/HV-GAR-02",
        f"/api/v1/trucks/{TRUCK}/plans",
        "/api/v1/plans/1",
    )
    try:
        for path in reads:
            assert client.get(path, headers=viewer).status_code == 200, path
        caplog.set_level(logging.WARNING, logger="ullage")
        own_postgres.ctl("stop", "-m", "fast")
        for _ in range(2):  # the first meets the pooled connections dead, the second finds no server
            for path in reads:
                response = client.get(path, headers=viewer)
                assert response.status_code == 503, (path, response.get_data(as_text=True))
                assert response.mimetype == "application/problem+json" and response.headers.get("Retry-After")
            response = client.post(PLANS, json={}, headers=bearer(tokens["dispatcher"]))
            assert response.status_code == 503 and response.headers.get("Retry-After")
        assert not [r for r in caplog.records if r.levelno >= logging.ERROR], caplog.text
        assert "database unavailable" in caplog.text
        own_postgres.ctl("start")
        for path in reads:
            assert client.get(path, headers=viewer).status_code == 200, path
    finally:
        db.dispose(app)


def test_postgres_restart_during_requests(tmp_path, own_postgres):
    url = own_postgres.url
    migrate(url)
    load_demo_network(url)
    tokens = add_tokens(url)
    server = start_gunicorn(url, tmp_path, workers=2, threads=2)
    dispatcher = bearer(tokens["dispatcher"])
    activate_a_plan(
        lambda path: _status_and_body(requests.post(server.url(path), json={}, headers=dispatcher, timeout=30))
    )
    results: list[tuple[float, str, str, int, bool, bool]] = []  # (t, kind, key, status, problem, retry-after)
    stop = threading.Event()
    odd: list[str] = []

    def load(worker: int) -> None:
        session = requests.Session()
        for i in range(2000):  # bounded in count and in time
            if stop.is_set():
                return
            key = f"pgr-{worker}-{i}-{uuid.uuid4().hex[:8]}"
            kind = ("post", "get", "trips")[i % 3]
            try:
                if kind == "post":
                    response = session.post(
                        server.url(PLANS),
                        json={},
                        timeout=10,
                        headers=bearer(tokens["dispatcher"], **{"Idempotency-Key": key}),
                    )
                else:
                    path = "/api/v1/sites/HV-GAR-02" if kind == "get" else f"/api/v1/trucks/{TRUCK}/trips?week=2026-W50"
                    response = session.get(server.url(path), timeout=10, headers=bearer(tokens["viewer"]))
                results.append(
                    (
                        time.monotonic(),
                        kind,
                        key,
                        response.status_code,
                        is_problem(response),
                        bool(response.headers.get("Retry-After")),
                    )
                )
                if response.status_code not in (200, 201, 503):
                    odd.append(response.text[:500])
            except requests.RequestException:
                results.append((time.monotonic(), kind, key, 0, False, False))
            time.sleep(0.01)

    threads = [threading.Thread(target=load, args=(n,)) for n in range(3)]
    try:
        for thread in threads:
            thread.start()
        time.sleep(1.5)
        own_postgres.ctl("stop", "-m", "fast")
        down_at = time.monotonic()
        time.sleep(2.0)
        ready_during = requests.get(server.url("/readyz"), timeout=10)
        start_issued = time.monotonic()
        own_postgres.ctl("start")
        back_at = time.monotonic()
        time.sleep(4.0)
    finally:
        stop.set()
        for thread in threads:
            thread.join(30)
    try:
        assert ready_during.status_code == 503
        during = [r for r in results if down_at + 0.2 < r[0] < start_issued]
        after = [r for r in results if r[0] > back_at + 2.0]
        statuses = {r[3] for r in results}
        unhandled = [line.get("exception", "")[-1500:] for line in server.log_lines() if line.get("level") == "ERROR"]
        log_text = server.log()
        if "Traceback" in log_text:
            unhandled.append(log_text[log_text.index("Traceback") - 300 :][:3000])
        assert statuses <= {200, 201, 503}, (
            f"unexpected statuses {statuses}; server errors: {unhandled[:2]}; bodies: {odd[:3]}"
        )
        assert during and all(r[3] == 503 for r in during), (
            f"requests during the outage must get 503: {[r for r in during if r[3] != 503][:5]}"
        )
        assert all(r[4] and r[5] for r in results if r[3] == 503), "503 must be problem+json with Retry-After"
        assert after and all(r[3] in (200, 201) for r in after), (
            f"not recovered 2 s after PostgreSQL was back: {[r[3] for r in after][:20]}"
        )
        # Nothing partial, nothing lost, nothing twice: retry every POST that was not acknowledged.
        acked = {r[2] for r in results if r[1] == "post" and r[3] == 201}
        unacked = {r[2] for r in results if r[1] == "post" and r[3] != 201}
        for key in unacked:
            converge(server, tokens["dispatcher"], key, LEASE.total_seconds() + 10)
        plans = assert_no_partial_plans(url)
        assert len(plans) == len(acked | unacked) + 1  # + the activated one
        # A retried acknowledged key replays, it does not record again.
        for key in list(acked)[:5]:
            replay = post_plan(server, tokens["dispatcher"], key)
            assert replay.status_code == 201 and replay.headers.get("Ullage-Replayed") == "true"
        assert len(plan_rows(url)) == len(plans)
    finally:
        assert server.stop() == 0
    assert "Traceback" not in server.log()


# ------------------------------------------------------------------ a worker killed mid-POST


@contextlib.contextmanager
def sqlite_write_lock(path: Path):
    """Hold SQLite's write lock from another connection (the app's writers wait in busy_timeout)."""
    conn = sqlite3.connect(path, isolation_level=None, timeout=10)
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield conn
    finally:
        conn.rollback()
        conn.close()


def _post_in_thread(server, token: str, key: str) -> tuple[threading.Thread, dict]:
    box: dict = {}

    def run() -> None:
        try:
            box["response"] = post_plan(server, token, key, timeout=30)
        except requests.RequestException as exc:
            box["error"] = exc

    thread = threading.Thread(target=run)
    thread.start()
    return thread, box


def test_worker_killed_mid_post_sqlite(tmp_path):
    """Kill the one worker while its POST waits for the write lock, and at random early points."""
    path = tmp_path / "kill.db"
    url = f"sqlite:///{path}"
    migrate(url)
    load_demo_network(url)
    tokens = add_tokens(url)
    server = start_gunicorn(url, tmp_path, workers=1, threads=2)
    keys = []
    try:
        for attempt, delay in enumerate((None, 0.01)):  # while waiting for the lock; early in the POST
            key = f"kill-{attempt}-{uuid.uuid4().hex[:8]}"
            keys.append(key)
            (worker,) = server.wait_workers(1)
            lock = sqlite_write_lock(path) if delay is None else contextlib.nullcontext()
            with lock:
                thread, box = _post_in_thread(server, tokens["dispatcher"], key)
                time.sleep(0.5 if delay is None else delay)
                os.kill(worker, signal.SIGKILL)
                thread.join(30)
            assert "response" not in box or box["response"].status_code in (201, 409, 503)
            deadline = time.monotonic() + 10
            while server.worker_pids() in ([], [worker]):
                assert time.monotonic() < deadline, "gunicorn did not boot a new worker"
                time.sleep(0.05)
            server.wait_workers(1)
            first = converge(server, tokens["dispatcher"], key, LEASE.total_seconds() + 10)
            again = post_plan(server, tokens["dispatcher"], key)
            assert again.status_code == 201 and again.json()["id"] == first.json()["id"]
        plans = assert_no_partial_plans(url)
        assert len(plans) == len(keys), f"{len(plans)} plans for {len(keys)} keys"
        assert server.process.poll() is None
    finally:
        assert server.stop() == 0


def test_worker_killed_after_claim_converges_after_lease_postgres(tmp_path, pg_migrated):
    """The claim is committed, then the worker dies while the plan waits on the truck's row lock:
    the retry gets 409 until the lease runs out, then takes over; exactly one plan."""
    with fresh_pg_database(pg_migrated, f"ullage_kill_{os.getpid()}") as url:
        migrate(url)
        load_demo_network(url)
        tokens = add_tokens(url)
        server = start_gunicorn(url, tmp_path, workers=1, threads=2)
        engine = create_engine(url)
        try:
            key = f"lease-{uuid.uuid4().hex[:8]}"
            (worker,) = server.wait_workers(1)
            with engine.connect() as holder:
                holder.execute(text("BEGIN"))
                holder.execute(text("SELECT id FROM trucks WHERE code = :c FOR UPDATE"), {"c": TRUCK})
                thread, box = _post_in_thread(server, tokens["dispatcher"], key)
                deadline = time.monotonic() + 10
                while True:  # until the claim is committed and the POST waits on our lock
                    claimed = holder.execute(
                        text(
                            "SELECT count(*) FROM idempotency_keys WHERE idempotency_key = :k AND state = 'in_progress'"
                        ),
                        {"k": key},
                    ).scalar_one()
                    if claimed:
                        break
                    assert time.monotonic() < deadline, "the POST never claimed its key"
                    time.sleep(0.05)
                time.sleep(0.2)
                os.kill(worker, signal.SIGKILL)
                thread.join(30)
                holder.execute(text("ROLLBACK"))
            assert "response" not in box
            server.wait_workers(1)
            early = post_plan(server, tokens["dispatcher"], key)
            assert early.status_code == 409 and early.headers.get("Retry-After") and is_problem(early)
            first = converge(server, tokens["dispatcher"], key, LEASE.total_seconds() + 10)
            assert post_plan(server, tokens["dispatcher"], key).json()["id"] == first.json()["id"]
            assert len(assert_no_partial_plans(url)) == 1
        finally:
            engine.dispose()
            assert server.stop() == 0


# ------------------------------------------------------------------ SIGTERM with a request in flight


def test_sigterm_lets_the_in_flight_request_finish(tmp_path):
    path = tmp_path / "term.db"
    url = f"sqlite:///{path}"
    migrate(url)
    load_demo_network(url)
    tokens = add_tokens(url)
    server = start_gunicorn(url, tmp_path, workers=2, threads=2)
    key = f"term-{uuid.uuid4().hex[:8]}"
    with sqlite_write_lock(path):
        thread, box = _post_in_thread(server, tokens["dispatcher"], key)
        time.sleep(0.5)  # the POST now waits for the write lock inside a worker
        server.process.send_signal(signal.SIGTERM)
        time.sleep(1.0)
    thread.join(30)
    assert server.process.wait(25) == 0
    assert box.get("response") is not None, box.get("error")
    assert box["response"].status_code == 201, box["response"].text
    assert len(assert_no_partial_plans(url)) == 1


# ------------------------------------------------------------------ SQLite locked past busy_timeout


def test_sqlite_write_locked_past_busy_timeout_is_503_with_retry_after(tmp_path, sqlite_template, monkeypatch, caplog):
    """Another connection holds the write lock longer than busy_timeout: every write answers 503
    problem+json with Retry-After (it was a 500: "database is locked" escaped as a driver error),
    logged as a warning, nothing recorded; once the lock is gone the same requests succeed."""
    monkeypatch.setattr(db, "SQLITE_BUSY_TIMEOUT_MS", 200)  # read when the engine and its connections are made
    path = tmp_path / "busy.db"
    shutil.copy(sqlite_template, path)
    url = f"sqlite:///{path}"
    load_demo_network(url)
    tokens = add_tokens(url)
    app = create_app({"DATABASE_URL": url, "TESTING": True})
    client = app.test_client()
    admin, dispatcher = bearer(tokens["admin"]), bearer(tokens["dispatcher"])
    etag = client.get(f"/api/v1/trucks/{TRUCK}", headers=admin).headers["ETag"]
    writes = (
        ("post", PLANS, {"json": {}, "headers": {**dispatcher, "Idempotency-Key": '"busy-1"'}}),
        ("post", PLANS, {"json": {}, "headers": dispatcher}),
        ("patch", f"/api/v1/trucks/{TRUCK}", {"json": {"name": "Renamed"}, "headers": {**admin, "If-Match": etag}}),
        (
            "post",
            "/api/v1/sites/HV-GAR-02/readings",
            {"json": {"level": 100.0, "measured_at": "2026-01-05T06:00:00+00:00"}, "headers": dispatcher},
        ),
    )
    try:
        caplog.set_level(logging.WARNING, logger="ullage")
        with sqlite_write_lock(path):
            for method, path_, kwargs in writes:
                response = getattr(client, method)(path_, **kwargs)
                assert response.status_code == 503, (path_, response.get_data(as_text=True))
                assert response.mimetype == "application/problem+json" and response.headers.get("Retry-After")
                assert "busy" in response.get_json()["detail"]
            # Reads do not wait for the writer (WAL).
            assert client.get(f"/api/v1/trucks/{TRUCK}", headers=admin).status_code == 200
        assert not [r for r in caplog.records if r.levelno >= logging.ERROR], caplog.text
        assert "database unavailable: OperationalError" in caplog.text
        assert plan_rows(url) == []
        for method, path_, kwargs in writes:
            response = getattr(client, method)(path_, **kwargs)
            assert response.status_code in (200, 201), response.get_data(as_text=True)
        assert len(assert_no_partial_plans(url)) == 2
    finally:
        db.dispose(app)


# ------------------------------------------------------------------ full disk under SQLite


def test_full_disk_sqlite_gives_507_and_loses_nothing(tmp_path, sqlite_template):
    path = tmp_path / "full.db"
    shutil.copy(sqlite_template, path)
    url = f"sqlite:///{path}"
    load_demo_network(url)
    tokens = add_tokens(url)
    # Plans until the disk is full: the per-token planning limit (tested in test_bounded.py) is off.
    app = create_app({"DATABASE_URL": url, "TESTING": True, "ULLAGE_PLANNING_PER_MINUTE": 0})
    engine = app.extensions["ullage.engine"]
    pages = sqlite3.connect(path).execute("PRAGMA page_count").fetchone()[0]
    limit = {"pages": pages + 40}

    @event.listens_for(engine, "connect")
    def _cap(dbapi_connection, _record):  # type: ignore[no-untyped-def]
        dbapi_connection.execute(f"PRAGMA max_page_count={limit['pages']}")

    engine.dispose()
    client = app.test_client()
    headers = bearer(tokens["dispatcher"])
    acked: dict[str, int] = {}
    full = None
    for i in range(300):  # bounded: the cap is reached long before
        key = f"full-{i}"
        response = client.post(PLANS, json={}, headers={**headers, "Idempotency-Key": key})
        if response.status_code == 201:
            acked[key] = response.get_json()["id"]
            continue
        full = response
        break
    assert full is not None, "the page cap was never reached"
    assert full.status_code in (503, 507), full.get_data(as_text=True)
    assert full.mimetype == "application/problem+json" and full.headers.get("Retry-After")
    assert acked, "no plan was recorded before the disk filled"
    for key, plan_id in acked.items():
        assert client.get(f"/api/v1/plans/{plan_id}", headers=bearer(tokens["viewer"])).status_code == 200
        replay = client.post(PLANS, json={}, headers={**headers, "Idempotency-Key": key})
        assert replay.status_code == 201 and replay.get_json()["id"] == plan_id
    engine.dispose()
    check = sqlite3.connect(path)
    assert check.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    check.close()
    assert sorted(acked.values()) == assert_no_partial_plans(url)
    # Space comes back: writes resume.
    limit["pages"] = 1_000_000
    engine.dispose()
    resumed = client.post(PLANS, json={}, headers={**headers, "Idempotency-Key": "after-space"})
    assert resumed.status_code == 201, resumed.get_data(as_text=True)
    assert len(assert_no_partial_plans(url)) == len(acked) + 1
    engine.dispose()
