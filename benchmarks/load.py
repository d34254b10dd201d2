"""Load benchmark on loopback: prints figures, it is not a test.

For SQLite and, separately, PostgreSQL (a fresh database ``ullage_bench`` on the server of
``--pg-url``, dropped afterwards), it migrates, loads the demo network, records and activates a plan,
starts gunicorn with the project's config on a free 127.0.0.1 port (a listening socket per worker;
``--shared-socket`` for the service's default, gunicorn's one shared socket) and runs bounded
scenarios:

* ``GET /livez`` (the framework's ceiling), ``GET`` a site, ``GET`` the weekly trips — with ``wrk``
  when installed (``--no-wrk`` to use the Python generator), else the Python generator; 32
  connections each, interleaved in 2 s slices so that the machine's drift weighs on each alike;
* ``POST`` a joint calculation of 50 sites and ``POST`` plan creation with Idempotency-Keys — Python
  generator (threads, one keep-alive ``http.client`` connection each), with the admin token (exempt
  from the per-token limits) and room for 8 waiting requests per worker (``ULLAGE_PLAN_QUEUE=7``):
  they measure the planning path's throughput, not its bounds;
* **bounded work** (``--scenario bounded``; its own gunicorn with the service's defaults): a truck of
  300 sites with an active plan; the weekly trips call of that truck measured alone (idle), then
  again while 8 dispatchers (a token each) post maximal joint calculations (``ULLAGE_MAX_PLAN_SITES``
  sites with load and stop limits, which today's planner cannot finish within the budget) and a
  viewer loops 92-day windows of the truck, each a new window. The clients honour ``Retry-After``.

Every scenario runs ``--seconds`` (default 10, at most 30). It prints requests per second, p50/p99
and error counts (and, per ``wrk`` slice, how its connections were split over the workers), and
checks: trips ≥ half of /livez; 0 errors; plan rows == 2xx count; under bounded work, the weekly
call's p99 within 5× its idle p99 and no answer but 200, 429 or 503 (with ``Retry-After``).

    .venv/bin/python benchmarks/load.py [--seconds 10] [--db sqlite|postgresql|both] [--shared-socket]
                                        [--max-requests N] [--scenario all|throughput|bounded]
"""

from __future__ import annotations

import argparse
import contextlib
import datetime as dt
import http.client
import json
import math
import os
import random
import re
import shutil
import signal
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
import uuid
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from alembic import command  # noqa: E402
from sqlalchemy import create_engine, text  # noqa: E402
from sqlalchemy.engine import make_url  # noqa: E402
from sqlalchemy.orm import Session  # noqa: E402

from service.auth import new_token, token_hash  # noqa: E402
from service.demo import SAMPLE_DATA, load_demo  # noqa: E402
from service.health import alembic_config  # noqa: E402
from service.persistence import repository as repo  # noqa: E402
from tests.reliability.helpers import connections_per_worker  # noqa: E402

HOST = "127.0.0.1"
TRUCK, SITE = "HV-R1", "HV-GAR-02"
MAX_SECONDS = 30
MAX_REQUESTS = 2_000_000  # a hard cap per scenario, whatever the speed
SLICE_SECONDS = 2  # the GET scenarios alternate in slices this long (interleaved_gets)
GET_CONNECTIONS = 32  # several per thread of 2 workers × 4 threads, so no thread waits for a client
#: The throughput scenarios' server: up to 8 planning requests per worker wait for its planning
#: process instead of being answered 503 (4 joint calculations or 8 plan POSTs may land on one worker).
THROUGHPUT_ENV = {"ULLAGE_PLAN_QUEUE": "7"}
BIG_TRUCK, BIG_SITES, PLANNERS = "BENCH-300", 300, 8
WEEKLY_CONNECTIONS = 2  # dispatch software polling the weekly call
WINDOW_PAUSE = 1.0  # between the bounded scenario's phases


@dataclass
class Figures:
    scenario: str
    database: str
    tool: str
    connections: int
    requests: int
    rps: float
    p50_ms: float
    p99_ms: float
    errors: int
    ok: int
    slices: str = ""  # per slice: req/s [connections per worker]


def python_figures(
    scenario: str, database: str, connections: int, seconds: float, total: int, ok: int, errors: int, lat: list
) -> Figures:
    """The figures of one run of the Python load generator."""
    p50, p99 = percentile(lat, 0.5), percentile(lat, 0.99)
    return Figures(scenario, database, "python", connections, total, total / seconds, p50, p99, errors, ok)


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind((HOST, 0))
        return sock.getsockname()[1]


def percentile(sorted_values: list[float], q: float) -> float:
    if not sorted_values:
        return float("nan")
    index = min(len(sorted_values) - 1, max(0, round(q * (len(sorted_values) - 1))))
    return sorted_values[index]


def python_load(
    port: int,
    method: str,
    path: str,
    headers: dict[str, str],
    seconds: float,
    connections: int,
    body: Callable[[int], tuple[bytes, dict[str, str]]] | None = None,
) -> tuple[int, int, int, list[float]]:
    """(requests, 2xx, errors, latencies in ms) from ``connections`` keep-alive threads."""
    latencies: list[list[float]] = [[] for _ in range(connections)]
    counts = [[0, 0, 0] for _ in range(connections)]
    deadline = time.monotonic() + seconds
    per_thread_cap = MAX_REQUESTS // connections

    def run(n: int) -> None:
        conn = http.client.HTTPConnection(HOST, port, timeout=30)
        i = 0
        while time.monotonic() < deadline and i < per_thread_cap:
            payload, extra = body(n * per_thread_cap + i) if body else (None, {})
            started = time.perf_counter()
            try:
                conn.request(method, path, body=payload, headers={**headers, **extra})
                response = conn.getresponse()
                response.read()
                status = response.status
            except (OSError, http.client.HTTPException):
                conn.close()
                conn = http.client.HTTPConnection(HOST, port, timeout=30)
                status = 0
            latencies[n].append((time.perf_counter() - started) * 1000)
            counts[n][0] += 1
            if 200 <= status < 300:
                counts[n][1] += 1
            else:
                counts[n][2] += 1
            i += 1
        conn.close()

    threads = [threading.Thread(target=run, args=(n,)) for n in range(connections)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(seconds + 60)
    total = [sum(c[k] for c in counts) for k in range(3)]
    return total[0], total[1], total[2], sorted(x for lat in latencies for x in lat)


def _ms(value: str) -> float:
    match = re.match(r"([\d.]+)(us|ms|s|m)$", value)
    if not match:
        return float("nan")
    number, unit = match.groups()
    return float(number) * {"us": 0.001, "ms": 1.0, "s": 1000.0, "m": 60000.0}[unit]


def wrk_load(
    port: int, path: str, headers: dict[str, str], seconds: float, connections: int, midway: Callable[[], str]
) -> tuple[int, int, float, float, float, str]:
    """(requests, non-2xx/3xx + socket errors, rps, p50, p99, what ``midway()`` said halfway) from wrk."""
    argv = ["wrk", "-t1", f"-c{connections}", f"-d{int(seconds)}s", "--latency", "--timeout", "10s"]
    for name, value in headers.items():
        argv += ["-H", f"{name}: {value}"]
    process = subprocess.Popen([*argv, f"http://{HOST}:{port}{path}"], stdout=subprocess.PIPE, text=True)
    time.sleep(seconds / 2)
    said = midway()
    out, _ = process.communicate(timeout=seconds + 30)
    if process.returncode:
        raise subprocess.CalledProcessError(process.returncode, argv, out)
    requests_ = int(re.search(r"(\d+) requests in", out).group(1))
    rps = float(re.search(r"Requests/sec:\s+([\d.]+)", out).group(1))
    found50, found99 = re.search(r"50%\s+(\S+)", out), re.search(r"99%\s+(\S+)", out)
    p50 = _ms(found50.group(1)) if found50 else float("nan")
    p99 = _ms(found99.group(1)) if found99 else float("nan")
    if not (found50 and found99):
        print("wrk output without a latency distribution:\n" + out, file=sys.stderr)
    errors = 0
    if match := re.search(r"Non-2xx or 3xx responses: (\d+)", out):
        errors += int(match.group(1))
    if match := re.search(r"Socket errors: connect (\d+), read (\d+), write (\d+), timeout (\d+)", out):
        errors += sum(int(g) for g in match.groups())
    return requests_, errors, rps, p50, p99, said


@contextlib.contextmanager
def gunicorn(
    url: str, workdir: Path, workers: int, shared_socket: bool, max_requests: int, extra_env: dict[str, str]
) -> Iterator[tuple[int, int]]:
    """gunicorn on a free loopback port, ready: yields (port, master pid)."""
    port = free_port()
    env = {
        **os.environ,
        "DATABASE_URL": url,
        "WEB_CONCURRENCY": str(workers),
        "ULLAGE_SECRET_KEY": "bench",
        "ULLAGE_METRICS_DIR": str(workdir / "prometheus"),
        "LOG_LEVEL": "WARNING",
        # No worker recycling while measuring (unless --max-requests): a worker's start costs about
        # 1.7 s of CPU and would land in one scenario's slice at random (in service, 20 000 requests
        # amortise it, < 0.1 ms each).
        "GUNICORN_CMD_ARGS": f"--max-requests {max_requests}",
        # A listening socket per worker unless --shared-socket (the service's default): with one
        # shared socket a slice's 32 connections can all land on one worker and leave the other
        # idle, which measures accept-queue luck rather than the request path. Each slice prints
        # its split either way; docs/reliability.md has both, and the cost of per-worker sockets
        # when workers restart (--max-requests).
        "ULLAGE_REUSE_PORT": "0" if shared_socket else "1",
        **extra_env,
    }
    log = open(workdir / "gunicorn.log", "wb")  # noqa: SIM115
    process = subprocess.Popen(
        [
            str(Path(sys.executable).parent / "gunicorn"),
            "--config",
            str(ROOT / "service" / "gunicorn_conf.py"),
            "--bind",
            f"{HOST}:{port}",
            "service.app:create_app()",
        ],
        cwd=workdir,
        env=env,
        stdout=log,
        stderr=subprocess.STDOUT,
    )
    log.close()
    try:
        deadline = time.monotonic() + 30
        while True:
            try:
                conn = http.client.HTTPConnection(HOST, port, timeout=2)
                conn.request("GET", "/readyz")
                ready = conn.getresponse().status == 200
                conn.close()
                if ready:
                    break
            except OSError:
                pass
            if process.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError("gunicorn did not become ready:\n" + (workdir / "gunicorn.log").read_text()[-2000:])
            time.sleep(0.1)
        yield port, process.pid
    finally:
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(30)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait(5)


def prepare(url: str) -> dict[str, str]:
    command.upgrade(alembic_config(url), "head")
    engine = create_engine(url)
    tokens = {}
    with Session(engine) as session:
        load_demo(session, SAMPLE_DATA, "L")
        for role in ("viewer", "dispatcher", "admin"):
            tokens[role] = new_token()
            repo.add_token(session, f"bench-{role}", role, token_hash(tokens[role]))
        session.commit()
    engine.dispose()
    return tokens


def count_plans(url: str) -> int:
    engine = create_engine(url)
    try:
        with engine.connect() as conn:
            return conn.execute(text("SELECT count(*) FROM plans")).scalar_one()
    finally:
        engine.dispose()


def request_json(
    port: int, method: str, path: str, headers: dict[str, str], body: object | None = None
) -> tuple[int, dict]:
    conn = http.client.HTTPConnection(HOST, port, timeout=30)
    payload = json.dumps(body).encode() if body is not None else None
    conn.request(
        method, path, body=payload, headers={**headers, **({"Content-Type": "application/json"} if payload else {})}
    )
    response = conn.getresponse()
    data = response.read()
    conn.close()
    return response.status, (json.loads(data) if data else {})


def joint_body() -> bytes:
    sites = [
        {
            "code": f"S{i:02d}",
            "demand_per_day": 50 + 37 * (i % 9),
            "holding_cost": 0.002 + 0.0003 * (i % 5),
            "stop_cost": 12 + i % 7,
            "tank_capacity": 4000 + 900 * (i % 11),
            "safe_fill": 0.9,
            "safety_stock": 200,
        }
        for i in range(50)
    ]
    return json.dumps({"dispatch_cost": 150, "truck_capacity": 36000, "max_stops": 10, "sites": sites}).encode()


def report_log(name: str, log: str) -> None:
    """Say which alarming lines the server logged (with the first one's context)."""
    for marker in ("database is locked", "WORKER TIMEOUT", "Traceback"):
        if marker in log:
            at = log.index(marker)
            context = log[max(0, log.rfind("\n", 0, max(0, at - 300)) + 1) : at + 600]
            print(f"!! {name}: server log contains {marker!r}:\n{context}", file=sys.stderr)


def run_database(
    name: str,
    url: str,
    tokens: dict[str, str],
    seconds: float,
    use_wrk: bool,
    workers: int,
    shared_socket: bool,
    max_requests: int,
) -> list[Figures]:
    out: list[Figures] = []
    with (
        tempfile.TemporaryDirectory(prefix=f"ullage-bench-{name}-") as workdir,
        gunicorn(url, Path(workdir), workers, shared_socket, max_requests, THROUGHPUT_ENV) as (port, master),
    ):
        viewer = {"Authorization": f"Bearer {tokens['viewer']}"}
        # The POST scenarios measure throughput: the admin token is exempt from the per-token limits.
        dispatcher = {"Authorization": f"Bearer {tokens['admin']}"}
        status, plan = request_json(port, "POST", f"/api/v1/trucks/{TRUCK}/plans", dispatcher, {})
        assert status == 201, plan
        status, _ = request_json(port, "POST", f"/api/v1/plans/{plan['id']}/activate", dispatcher)
        assert status == 200
        iso = dt.date.today().isocalendar()
        week = f"{iso.year}-W{iso.week:02d}"
        gets = [
            ("GET /livez", "/livez", {}),
            ("GET site", f"/api/v1/sites/{SITE}", viewer),
            ("GET weekly trips", f"/api/v1/trucks/{TRUCK}/trips?week={week}", viewer),
        ]

        def split() -> str:
            return "/".join(str(n) for n in sorted(connections_per_worker(master, port).values()))

        out += interleaved_gets(port, gets, name, seconds, use_wrk, split)
        joint = joint_body()
        total, ok, errors, lat = python_load(
            port,
            "POST",
            "/api/v1/calculations/joint",
            {**dispatcher, "Content-Type": "application/json"},
            seconds,
            4,
            body=lambda _i: (joint, {}),
        )
        out.append(python_figures("POST joint calc (50 sites)", name, 4, seconds, total, ok, errors, lat))
        before = count_plans(url)
        run_id = uuid.uuid4().hex[:8]
        total, ok, errors, lat = python_load(
            port,
            "POST",
            f"/api/v1/trucks/{TRUCK}/plans",
            {**dispatcher, "Content-Type": "application/json"},
            seconds,
            8,
            body=lambda i: (b"{}", {"Idempotency-Key": f'"bench-{run_id}-{i}"'}),
        )
        out.append(python_figures("POST plan (Idempotency-Key)", name, 8, seconds, total, ok, errors, lat))
        log = (Path(workdir) / "gunicorn.log").read_text(errors="replace")
    recorded = count_plans(url) - before
    out[-1].scenario += f" rows={recorded}"
    if recorded != ok:
        print(f"!! {name}: {recorded} plan rows for {ok} 2xx answers", file=sys.stderr)
    report_log(name, log)
    return out


def interleaved_gets(
    port: int,
    gets: list[tuple[str, str, dict[str, str]]],
    database: str,
    seconds: float,
    use_wrk: bool,
    split: Callable[[], str],
) -> list[Figures]:
    """The GET scenarios in alternating slices of ``SLICE_SECONDS`` (A B C A B C …), same connections.

    This machine's speed drifts by a factor of two within minutes (this script printed /livez at
    1 064 and 2 599 req/s in runs a few minutes apart), so scenarios run one after the other would compare
    different machines; interleaved, the drift weighs on each alike. p50 is the median of the
    slices' p50s and p99 the largest slice p99 (wrk reports percentiles per run). With wrk, each
    slice also notes how its connections were split over the workers halfway through (``split``).
    """
    rounds = max(1, round(seconds / SLICE_SECONDS))
    slices: dict[str, list[tuple[int, int, float, float, float, str]]] = {label: [] for label, _, _ in gets}
    latencies: dict[str, list[float]] = {label: [] for label, _, _ in gets}
    for _ in range(rounds):
        for label, path, headers in gets:
            if use_wrk:
                slices[label].append(wrk_load(port, path, headers, SLICE_SECONDS, GET_CONNECTIONS, split))
            else:
                total, ok, errors, lat = python_load(port, "GET", path, headers, SLICE_SECONDS, GET_CONNECTIONS)
                slices[label].append((total, errors, total / SLICE_SECONDS, 0.0, 0.0, ""))
                latencies[label] += lat
    out = []
    for label, parts in slices.items():
        total, errors = sum(p[0] for p in parts), sum(p[1] for p in parts)
        elapsed = sum(p[0] / p[2] for p in parts if p[2]) or rounds * SLICE_SECONDS
        if use_wrk:
            p50s = [p[3] for p in parts if not math.isnan(p[3])]  # a slice wrk printed no distribution for
            p99s = [p[4] for p in parts if not math.isnan(p[4])]
            p50 = statistics.median(p50s) if p50s else float("nan")
            p99 = max(p99s) if p99s else float("nan")
        else:
            lat = sorted(latencies[label])
            p50, p99 = percentile(lat, 0.5), percentile(lat, 0.99)
        tool = "wrk" if use_wrk else "python"
        figures = Figures(
            label, database, tool, GET_CONNECTIONS, total, total / elapsed, p50, p99, errors, total - errors
        )
        if use_wrk:
            figures.slices = ", ".join(f"{p[2]:.0f} [{p[5]}]" for p in parts)
        out.append(figures)
    return out


@dataclass
class Bounded:
    """The bounded-work scenario's figures on one database."""

    database: str
    idle: Figures
    looped: Figures  # only the viewer looping windows
    loaded: Figures
    looper: dict[str, int]  # the looper's answers in its phase alone
    heavy: dict[str, int]  # "status kind" → count ("0 …": no answer)
    windows: dict[str, int]
    max_sites: int
    plan_seconds: float

    @property
    def ratio(self) -> float:
        return self.loaded.p99_ms / self.idle.p99_ms if self.idle.p99_ms else math.inf

    @property
    def errors(self) -> int:
        expected = ("200", "429", "503")
        answers = (*self.heavy.items(), *self.windows.items(), *self.looper.items())
        unexpected = sum(n for answer, n in answers if answer[:3] not in expected)
        return unexpected + self.idle.errors + self.looped.errors + self.loaded.errors


def add_big_truck(url: str) -> dict[str, str]:
    """A truck of ``BIG_SITES`` invented tanks (no load or stop limit, so its plan is quick) and
    ``PLANNERS`` dispatcher tokens and a viewer token of their own."""
    rng = random.Random(300)
    engine = create_engine(url)
    tokens = {}
    with Session(engine) as session:
        truck = repo.add_truck(
            session,
            {"code": BIG_TRUCK, "name": "Bench 300", "dispatch_cost": 200.0, "capacity": 1e9, "max_stops": None},
        )
        for i in range(BIG_SITES):
            demand = rng.uniform(50, 5000)
            repo.add_site(
                session,
                {
                    "code": f"B300-{i:03d}",
                    "name": f"Bench tank {i}",
                    "demand_per_day": demand,
                    "holding_cost": rng.uniform(0.0005, 0.005),
                    "stop_cost": rng.uniform(5, 50),
                    "tank_capacity": demand * math.exp(rng.uniform(math.log(3), math.log(60))) / 0.9,
                    "safe_fill": 0.9,
                    "safety_stock": 0.0,
                },
                truck,
            )
        for name, role in [*((f"planner-{i}", "dispatcher") for i in range(PLANNERS)), ("looper", "viewer")]:
            tokens[name] = new_token()
            repo.add_token(session, f"bench-{name}", role, token_hash(tokens[name]))
        session.commit()
    engine.dispose()
    return tokens


def maximal_body(sites: int) -> bytes:
    """A joint calculation of ``sites`` invented tanks on a 36 000 L truck of 10 stops."""
    rng = random.Random(sites)
    rows = []
    for i in range(sites):
        demand = rng.uniform(50, 5000)
        rows.append(
            {
                "code": f"M{i}",
                "demand_per_day": demand,
                "holding_cost": rng.uniform(0.0005, 0.005),
                "stop_cost": rng.uniform(5, 50),
                "tank_capacity": demand * math.exp(rng.uniform(math.log(3), math.log(60))) / 0.9,
            }
        )
    return json.dumps({"dispatch_cost": 200, "truck_capacity": 36000, "max_stops": 10, "sites": rows}).encode()


def looping_client(
    port: int, requests_: Callable[[int], tuple[str, str, bytes | None]], headers: dict[str, str], until: float
) -> dict[str, int]:
    """One client, request after request until ``until``, sleeping as ``Retry-After`` says (never
    past ``until``; then on a new connection, as gunicorn has closed the idle one after 5 s).
    Returns "status kind" → count ("0" for no answer; kind is the problem type's last segment)."""
    answers: dict[str, int] = {}
    conn = http.client.HTTPConnection(HOST, port, timeout=60)
    i = 0
    while time.monotonic() < until and i < MAX_REQUESTS:
        method, path, body = requests_(i)
        i += 1
        retry = None
        try:
            conn.request(method, path, body=body, headers=headers)
            response = conn.getresponse()
            data = response.read()
            retry = response.getheader("Retry-After")
            answer = str(response.status)
            if response.getheader("Content-Type") == "application/problem+json":
                answer += " " + json.loads(data)["type"].rsplit("/", 1)[-1]
        except (OSError, http.client.HTTPException) as exc:
            answer = f"0 {type(exc).__name__}"
            retry = "0"
        answers[answer] = answers.get(answer, 0) + 1
        if retry is not None:
            conn.close()
            time.sleep(max(0.0, min(float(retry), until - time.monotonic())))
            conn = http.client.HTTPConnection(HOST, port, timeout=60)
    conn.close()
    return answers


def run_bounded(
    name: str, url: str, tokens: dict[str, str], seconds: float, workers: int, plan_seconds: float | None
) -> Bounded:
    """Weekly call of a 300-site truck, idle, then under 8 maximal calculations and a window looper."""
    tokens = {**tokens, **add_big_truck(url)}
    env = {} if plan_seconds is None else {"ULLAGE_PLAN_SECONDS": f"{plan_seconds:g}"}
    with (
        tempfile.TemporaryDirectory(prefix=f"ullage-bounded-{name}-") as workdir,
        gunicorn(url, Path(workdir), workers, False, 0, env) as (port, _master),
    ):
        admin = {"Authorization": f"Bearer {tokens['admin']}"}
        status, plan = request_json(port, "POST", f"/api/v1/trucks/{BIG_TRUCK}/plans", admin, {})
        assert status == 201, plan
        assert request_json(port, "POST", f"/api/v1/plans/{plan['id']}/activate", admin)[0] == 200
        status, config = request_json(port, "GET", "/api/v1/settings", admin)
        max_sites, budget = config["max_sites_per_calculation"], config["planning_seconds"]
        iso = dt.date.today().isocalendar()
        weekly = f"/api/v1/trucks/{BIG_TRUCK}/trips?week={iso.year}-W{iso.week:02d}"
        viewer = {"Authorization": f"Bearer {tokens['viewer']}"}
        assert request_json(port, "GET", weekly, viewer)[0] == 200  # the worker's cache, as in service

        total, ok, errors, lat = python_load(port, "GET", weekly, viewer, seconds, WEEKLY_CONNECTIONS)
        idle = python_figures(
            "GET weekly trips (300 sites), idle", name, WEEKLY_CONNECTIONS, seconds, total, ok, errors, lat
        )

        body, first = maximal_body(max_sites), dt.date.today()
        heavy: list[dict[str, int]] = []
        windows: list[dict[str, int]] = []

        def planner(token: str) -> None:
            headers = {"Authorization": f"Bearer {token}", "Content-Type": "application/json"}
            heavy.append(looping_client(port, lambda _i: ("POST", "/api/v1/calculations/joint", body), headers, until))

        def window(i: int) -> tuple[str, str, None]:
            start = first + dt.timedelta(days=i % 300)
            return "GET", f"/api/v1/trucks/{BIG_TRUCK}/trips?from={start}&to={start + dt.timedelta(days=91)}", None

        def looper(out: list[dict[str, int]], until: float) -> None:
            out.append(looping_client(port, window, {"Authorization": f"Bearer {tokens['looper']}"}, until))

        # The viewer alone (its own per-token limit of heavy reads applies), then everyone.
        alone: list[dict[str, int]] = []
        thread = threading.Thread(target=looper, args=(alone, time.monotonic() + seconds + 1))
        thread.start()
        time.sleep(0.5)
        total, ok, errors, lat = python_load(port, "GET", weekly, viewer, seconds, WEEKLY_CONNECTIONS)
        thread.join(2 * budget + 60)
        looped = python_figures("weekly, window looper", name, WEEKLY_CONNECTIONS, seconds, total, ok, errors, lat)
        time.sleep(WINDOW_PAUSE)
        until = time.monotonic() + seconds + 1
        threads = [threading.Thread(target=planner, args=(tokens[f"planner-{i}"],)) for i in range(PLANNERS)]
        threads.append(threading.Thread(target=looper, args=(windows, until)))
        for thread in threads:
            thread.start()
        time.sleep(1)  # the computations and the looper are under way
        total, ok, errors, lat = python_load(port, "GET", weekly, viewer, seconds, WEEKLY_CONNECTIONS)
        for thread in threads:
            thread.join(2 * budget + 60)
        loaded = python_figures(
            "GET weekly trips (300 sites), loaded", name, WEEKLY_CONNECTIONS, seconds, total, ok, errors, lat
        )
        log = (Path(workdir) / "gunicorn.log").read_text(errors="replace")
    report_log(name, log)

    def merged(parts: list[dict[str, int]]) -> dict[str, int]:
        out: dict[str, int] = {}
        for part in parts:
            for status, count in part.items():
                out[status] = out.get(status, 0) + count
        return dict(sorted(out.items()))

    return Bounded(name, idle, looped, loaded, merged(alone), merged(heavy), merged(windows), max_sites, budget)


def print_bounded(results: list[Bounded], seconds: float, workers: int) -> list[str]:
    """The bounded-work table and its targets; returns the targets missed."""
    print(
        f"\nBounded work: gunicorn {workers} workers, the service's defaults; the weekly call of a {BIG_SITES}-site truck, "
        f"{seconds:g} s each: idle; while a viewer loops 92-day windows; while {PLANNERS} dispatchers also post "
        "maximal calculations\n"
    )
    header = f"| {'db':<10} | {'weekly call':<11} | {'requests':>8} | {'p50 ms':>7} | {'p99 ms':>7} | {'errors':>6} |"
    print(header)
    print("|" + "|".join("-" * len(cell) for cell in header.split("|")[1:-1]) + "|")
    for r in results:
        for label, f in (("idle", r.idle), ("looper", r.looped), ("everyone", r.loaded)):
            print(
                f"| {r.database:<10} | {label:<11} | {f.requests:>8} | {f.p50_ms:>7.2f} | {f.p99_ms:>7.2f} | {f.errors:>6} |"
            )
    failures = []
    for r in results:
        print(f"\n{r.database}: the viewer alone, 92-day windows by answer: {r.looper}")
        print(
            f"{r.database}: with everyone, maximal calculations ({r.max_sites} sites, budget {r.plan_seconds:g} s), answers by status: "
            f"{r.heavy}; 92-day windows: {r.windows}"
        )
        print(
            f"{r.database}: weekly p99 / idle p99 = {r.looped.p99_ms / r.idle.p99_ms:.2f} with the looper, "
            f"{r.ratio:.2f} with everyone (target ≤ 5); errors {r.errors} (target 0)"
        )
        if r.ratio > 5 or r.looped.p99_ms > 5 * r.idle.p99_ms:
            failures.append(f"{r.database}: weekly p99 more than 5× idle")
        if r.errors:
            failures.append(f"{r.database}: {r.errors} errors under bounded work")
    return failures


@contextlib.contextmanager
def bench_postgres(base_url: str, name: str = "ullage_bench") -> Iterator[str]:
    """A fresh database ``name`` on the server of ``base_url``, dropped afterwards (also benchmarks/reads.py)."""
    own = make_url(base_url).set(database=name)
    admin = create_engine(make_url(base_url), isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    try:
        yield own.render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


def print_throughput(figures: list[Figures], args: argparse.Namespace, seconds: float) -> list[str]:
    """The throughput table and its targets; returns the targets missed."""
    sockets = "one shared listening socket" if args.shared_socket else "a listening socket each"
    recycling = f"recycled every {args.max_requests} requests" if args.max_requests else "never recycled"
    print(
        f"\nUllage load benchmark: gunicorn {args.workers} workers (gthread, {sockets}, {recycling}), "
        f"loopback, {seconds:g} s per scenario, {os.cpu_count()} CPUs shared with the load generator\n"
    )
    header = (
        f"| {'scenario':<38} | {'db':<10} | {'tool':<6} | {'conn':>4} | {'requests':>8} | {'req/s':>8} | "
        f"{'p50 ms':>7} | {'p99 ms':>7} | {'errors':>6} |"
    )
    print(header)
    print("|" + "|".join("-" * (len(cell)) for cell in header.split("|")[1:-1]) + "|")
    for f in figures:
        print(
            f"| {f.scenario:<38} | {f.database:<10} | {f.tool:<6} | {f.connections:>4} | {f.requests:>8} | "
            f"{f.rps:>8.0f} | {f.p50_ms:>7.2f} | {f.p99_ms:>7.2f} | {f.errors:>6} |"
        )
    print("\nslices, req/s [connections per worker, halfway through]:")
    for f in figures:
        if f.slices:
            print(f"  {f.database} {f.scenario}: {f.slices}")
    failures = []
    for database in {f.database for f in figures}:
        rows = {f.scenario.split(" rows=")[0]: f for f in figures if f.database == database}
        livez, trips = rows["GET /livez"], rows["GET weekly trips"]
        ratio = trips.rps / livez.rps if livez.rps else 0
        print(f"\n{database}: trips / livez throughput = {ratio:.2f} (target ≥ 0.50)")
        if ratio < 0.5:
            failures.append(f"{database}: trips throughput {ratio:.2f} of /livez")
        plan = next(f for f in figures if f.database == database and f.scenario.startswith("POST plan"))
        rows_recorded = int(plan.scenario.split("rows=")[1])
        print(f"{database}: plan rows {rows_recorded} == 2xx {plan.ok}: {rows_recorded == plan.ok}")
        if rows_recorded != plan.ok:
            failures.append(f"{database}: plan rows {rows_recorded} != 2xx {plan.ok}")
    for f in figures:
        if f.errors:
            failures.append(f"{f.database} {f.scenario}: {f.errors} errors")
    return failures


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seconds", type=float, default=10.0, help=f"per scenario (≤ {MAX_SECONDS})")
    parser.add_argument("--db", choices=("sqlite", "postgresql", "both"), default="both")
    parser.add_argument(
        "--pg-url",
        default=os.environ.get("BENCH_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"),
    )
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--no-wrk", action="store_true", help="use the Python generator for the GETs too")
    parser.add_argument(
        "--shared-socket", action="store_true", help="one listening socket for all workers (gunicorn's default)"
    )
    parser.add_argument(
        "--max-requests", type=int, default=0, help="recycle each worker after this many requests (0: never)"
    )
    parser.add_argument("--scenario", choices=("all", "throughput", "bounded"), default="all")
    parser.add_argument(
        "--plan-seconds",
        type=float,
        default=None,
        help="ULLAGE_PLAN_SECONDS of the bounded scenario (default: the service's)",
    )
    args = parser.parse_args(argv)
    seconds = min(max(args.seconds, 1.0), MAX_SECONDS)
    use_wrk = not args.no_wrk and shutil.which("wrk") is not None
    figures: list[Figures] = []
    bounded: list[Bounded] = []

    def run(name: str, url: str) -> None:
        tokens = prepare(url)
        if args.scenario in ("all", "throughput"):
            figures.extend(
                run_database(name, url, tokens, seconds, use_wrk, args.workers, args.shared_socket, args.max_requests)
            )
        if args.scenario in ("all", "bounded"):
            bounded.append(run_bounded(name, url, tokens, seconds, args.workers, args.plan_seconds))

    if args.db in ("sqlite", "both"):
        with tempfile.TemporaryDirectory(prefix="ullage-bench-db-") as directory:
            run("sqlite", f"sqlite:///{directory}/bench.db")
    if args.db in ("postgresql", "both"):
        with bench_postgres(args.pg_url) as url:
            run("postgresql", url)
    failures = print_throughput(figures, args, seconds) if figures else []
    if bounded:
        failures += print_bounded(bounded, seconds, args.workers)
    print("\nall targets met" if not failures else "\nTARGETS MISSED:\n  " + "\n  ".join(failures))
    return 0 if not failures else 1


if __name__ == "__main__":
    raise SystemExit(main())
