"""Truly concurrent plan requests and activations against a real threaded server (both databases)."""

from __future__ import annotations

import multiprocessing
import threading
import time
from concurrent.futures import ThreadPoolExecutor

import pytest
import requests
from sqlalchemy import func, select
from werkzeug.serving import make_server

from service import create_app
from service.persistence.models import IdempotencyRecord, Plan
from service.request_db import dispose
from tests.api.one_truck import post_network

START = "2026-12-07"


PROCESSES = 3
#: These tests are about idempotency and activation under concurrency; the bounds on planning
#: (per-token limit, the planning processes' waiting room) are lifted here and tested in test_bounded.py.
UNBOUNDED = {"ULLAGE_PLANNING_PER_MINUTE": "0", "ULLAGE_PLAN_QUEUE": "64"}


def _serve(database_url: str, ports) -> None:  # runs in a spawned child process
    from service import create_app  # noqa: PLC0415

    app = create_app({"DATABASE_URL": database_url, "TESTING": True, **UNBOUNDED})
    srv = make_server("127.0.0.1", 0, app, threaded=True)
    ports.put(srv.server_port)
    srv.serve_forever()


@pytest.fixture(params=["threads", "processes"])
def servers(request, app):
    """Base URLs of real servers on free ports: one threaded server in this process, or
    PROCESSES server processes (each threaded) on the same database. Requests go round-robin."""
    if request.param == "threads":
        unbounded = create_app({"DATABASE_URL": app.config["DATABASE_URL"], "TESTING": True, **UNBOUNDED})
        srv = make_server("127.0.0.1", 0, unbounded, threaded=True)
        thread = threading.Thread(target=srv.serve_forever, daemon=True)
        thread.start()
        try:
            yield [f"http://127.0.0.1:{srv.server_port}"]
        finally:
            srv.shutdown()
            thread.join(10)
            dispose(unbounded)
        return
    context = multiprocessing.get_context("spawn")
    ports = context.Queue()
    children = [
        # Not daemonic: a server starts its planning processes (service.compute), which a daemonic
        # process may not; the children are terminated below in any case.
        context.Process(target=_serve, args=(app.config["DATABASE_URL"], ports), daemon=False)
        for _ in range(PROCESSES)
    ]
    for child in children:
        child.start()
    try:
        yield [f"http://127.0.0.1:{ports.get(timeout=60)}" for _ in children]
    finally:
        for child in children:
            child.terminate()
        for child in children:
            child.join(10)


@pytest.fixture
def network(client, auth):
    post_network(client, auth, [150.0 + 100 * i for i in range(4)])


def _post_until_done(base, headers, key, barrier, deadline):
    barrier.wait()
    statuses = []
    with requests.Session() as http:
        while True:
            response = http.post(
                f"{base}/api/v1/trucks/T1/plans",
                json={"start_date": START},
                headers=headers | {"Idempotency-Key": f'"{key}"'},
                timeout=60,
            )
            statuses.append(response.status_code)
            if response.status_code != 409 or time.monotonic() > deadline:
                return key, statuses, response
            time.sleep(min(0.5, 0.05 * len(statuses)))


def test_50_requests_10_keys_make_10_plans(servers, auth, network, db_session):
    keys = [f"conc-{k}" for k in range(10)]
    jobs = [key for key in keys for _ in range(5)]
    barrier = threading.Barrier(len(jobs))
    deadline = time.monotonic() + 120
    headers = auth("dispatcher")
    with ThreadPoolExecutor(len(jobs)) as pool:
        results = list(
            pool.map(
                lambda job: _post_until_done(servers[job[0] % len(servers)], headers, job[1], barrier, deadline),
                enumerate(jobs),
            )
        )
    every = [s for _key, statuses, _r in results for s in statuses]
    assert not [s for s in every if s >= 500], every
    assert {r.status_code for _k, _s, r in results} == {201}, [(k, s) for k, s, _r in results]
    ids: dict[str, set[int]] = {}
    for key, _statuses, response in results:
        ids.setdefault(key, set()).add(response.json()["id"])
    assert all(len(v) == 1 for v in ids.values()), ids
    assert len({next(iter(v)) for v in ids.values()}) == 10
    db_session.expire_all()
    assert db_session.scalar(select(func.count()).select_from(Plan)) == 10
    done = db_session.scalar(
        select(func.count()).select_from(IdempotencyRecord).where(IdempotencyRecord.state == "done")
    )
    assert done == 10
    replayed = sum(1 for _k, _s, r in results if r.headers.get("Ullage-Replayed") == "true")
    assert replayed == 40


def test_20_concurrent_activations_leave_one_active(servers, client, auth, network, db_session):
    ids = []
    for _ in range(20):
        response = client.post("/api/v1/trucks/T1/plans", json={"start_date": START}, headers=auth("dispatcher"))
        assert response.status_code == 201
        ids.append(response.get_json()["id"])
    barrier = threading.Barrier(len(ids))
    headers = auth("dispatcher")

    def activate(job):
        index, plan_id = job
        barrier.wait()
        base = servers[index % len(servers)]
        return requests.post(f"{base}/api/v1/plans/{plan_id}/activate", headers=headers, timeout=60).status_code

    with ThreadPoolExecutor(len(ids)) as pool:
        codes = list(pool.map(activate, enumerate(ids)))
    assert not [c for c in codes if c >= 500], codes
    assert set(codes) <= {200, 409}, codes
    assert 200 in codes
    db_session.expire_all()
    active = db_session.scalars(
        select(Plan.id).where(
            Plan.truck_id == db_session.scalar(select(Plan.truck_id).where(Plan.id == ids[0])), Plan.status == "active"
        )
    ).all()
    assert len(active) == 1
    others = db_session.scalars(select(Plan.status).where(Plan.id.in_(ids), Plan.id != active[0])).all()
    assert set(others) <= {"superseded", "proposed"}
    # Every plan whose activation answered 200 was active at some point, so it is now superseded
    # unless it is the one active plan.
    for plan_id, code in zip(ids, codes, strict=True):
        if code == 200 and plan_id != active[0]:
            assert db_session.scalar(select(Plan.status).where(Plan.id == plan_id)) == "superseded"
