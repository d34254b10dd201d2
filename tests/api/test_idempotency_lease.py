"""Idempotency-Key claims under a slow plan, and the purge of expired records (issue 14 §3).

A plan computation made slower than the lease (the planner wrapped in a sleep, the lease cut to
1.5 s, renewed every third of it: 0.8 s lapsed once on a loaded machine) must run once, its
retries must answer 409 + ``Retry-After`` while it runs and
the first retry after it is done must get its response. Before the heartbeat, on PostgreSQL every
retry after the lease took the claim over and started a computation of its own; on SQLite every
retry waited for the database's write lock instead of answering.
"""

from __future__ import annotations

import datetime as dt
import json
import threading
import time

import pytest
from flask import g
from sqlalchemy import func, select

from service import bounded, idempotency
from service.api import plans as plans_api
from service.persistence.models import IdempotencyRecord, Plan, Token
from tests.api.one_truck import post_network
from tests.reliability import slow_planner as slow_planner_module

URL = "/api/v1/trucks/T1/plans"
BODY = {"start_date": "2026-12-07"}
LEASE_SECONDS = 1.5
SLOW_SECONDS = slow_planner_module.SLOW_SECONDS  # more than three leases


@pytest.fixture
def network(client, auth):
    post_network(client, auth, (300.0, 120.0, 650.0))


@pytest.fixture
def slow_planner(monkeypatch):
    """The planner, each call SLOW_SECONDS longer; returns the list of the calls' start times.

    The planner runs in the service's planning processes, so the stand-in is a module-level
    function they can import, and the calls are counted where the worker hands them over.
    """
    calls: list[float] = []
    real_run = bounded.run

    def counted(fn, *args, **kwargs):  # type: ignore[no-untyped-def]
        if g.get("pool_admitted"):  # run() first takes the pool's place, then calls itself once
            calls.append(time.monotonic())
        return real_run(fn, *args, **kwargs)

    monkeypatch.setattr(plans_api, "plan_joint", slow_planner_module.slow)
    monkeypatch.setattr(bounded, "run", counted)
    monkeypatch.setattr(idempotency, "LEASE", dt.timedelta(seconds=LEASE_SECONDS))
    return calls


def plans_count(db_session) -> int:
    return db_session.scalar(select(func.count()).select_from(Plan))


def test_a_plan_slower_than_the_lease_runs_once_and_the_first_retry_after_it_gets_it(
    app, auth, network, db_session, slow_planner
):
    headers = auth("dispatcher", **{"Idempotency-Key": '"slow-plan"'})
    original: dict = {}

    def send_original() -> None:
        response = app.test_client().post(URL, json=BODY, headers=headers)
        original.update(response=response, answered=time.monotonic())

    thread = threading.Thread(target=send_original)
    thread.start()
    deadline = time.monotonic() + 10
    while not slow_planner and time.monotonic() < deadline:
        time.sleep(0.01)
    assert slow_planner, "the original request never reached the planner"

    retries = []  # (sent at, response): a client that keeps retrying every 0.2 s
    deadline = time.monotonic() + SLOW_SECONDS + 15
    while time.monotonic() < deadline:
        sent = time.monotonic()
        response = app.test_client().post(URL, json=BODY, headers=headers)
        retries.append((sent, response))
        if response.status_code != 409:
            break
        time.sleep(0.2)
    thread.join(30)
    assert not thread.is_alive()

    first = original["response"]
    assert first.status_code == 201, first.get_json()
    assert len(slow_planner) == 1, f"{len(slow_planner)} computations for one key"
    *waiting, (last_sent, last) = retries
    # While the original computed (for more than three leases), retries were told to come back.
    assert len(waiting) >= 3, [r.status_code for _, r in retries]
    for sent, response in waiting:
        assert response.status_code == 409 and response.mimetype == "application/problem+json"
        assert int(response.headers["Retry-After"]) >= 1
        assert sent < original["answered"], "a retry sent after the plan was recorded still got 409"
    assert last.status_code == 201 and last.headers.get("Ullage-Replayed") == "true"
    assert last.get_json() == first.get_json()
    assert last.headers["Location"] == first.headers["Location"]
    assert plans_count(db_session) == 1


def test_the_heartbeat_keeps_renewing_the_lease_while_the_plan_runs(app, auth, network, db_session, slow_planner):
    if app.config["DATABASE_URL"].startswith("sqlite"):
        # SQLite: the computing request holds the one write lock, so no renewal can land; the
        # lock itself keeps a retry from taking over (checked by the test above).
        pytest.skip("the renewals are a PostgreSQL matter")
    headers = auth("dispatcher", **{"Idempotency-Key": '"watched"'})
    thread = threading.Thread(target=lambda: app.test_client().post(URL, json=BODY, headers=headers))
    thread.start()
    try:
        deadline = time.monotonic() + 10
        while not slow_planner and time.monotonic() < deadline:
            time.sleep(0.01)
        seen = set()
        for _ in range(8):
            time.sleep(LEASE_SECONDS / 2)
            db_session.expire_all()
            row = db_session.scalars(
                select(IdempotencyRecord).where(IdempotencyRecord.idempotency_key == "watched")
            ).one()
            if row.state != "in_progress":
                break
            assert dt.datetime.now(dt.UTC) - row.claimed_at < dt.timedelta(seconds=LEASE_SECONDS)
            seen.add(row.claimed_at)
        assert len(seen) >= 3, "the claim was not renewed while the plan ran"
    finally:
        thread.join(30)
    db_session.expire_all()
    row = db_session.scalars(select(IdempotencyRecord).where(IdempotencyRecord.idempotency_key == "watched")).one()
    assert row.state == "done"


# --- purging expired records ---------------------------------------------------------------------


def _token_id(db_session, name: str) -> int:
    return db_session.scalars(select(Token.id).where(Token.name == name)).one()


def _record(db_session, token_id: int, key: str, age: dt.timedelta) -> None:
    at = dt.datetime.now(dt.UTC) - age
    db_session.add(
        IdempotencyRecord(
            token_id=token_id,
            idempotency_key=key,
            method="POST",
            path=URL,
            body_sha256=idempotency.fingerprint("POST", URL, json.dumps(BODY).encode()),
            state="done",
            claim="0" * 32,
            claimed_at=at,
            response_status=201,
            response_body="{}",
            created_at=at,
        )
    )
    db_session.commit()


def _keys(db_session) -> set[str]:
    db_session.expire_all()
    return set(db_session.scalars(select(IdempotencyRecord.idempotency_key)))


@pytest.fixture
def purge_clock(monkeypatch):
    """The purge's clock, moved by hand; the process's last purge forgotten."""
    now = [1000.0]
    monkeypatch.setattr(idempotency, "_clock", lambda: now[0], raising=False)
    monkeypatch.setattr(idempotency, "_last_purge", [float("-inf")], raising=False)
    return now


def test_expired_records_of_every_token_are_purged_in_bounded_batches(
    client, auth, network, db_session, purge_clock, monkeypatch
):
    monkeypatch.setattr(idempotency, "PURGE_BATCH", 2, raising=False)
    admin = _token_id(db_session, "test-admin")
    for hours, key in ((30, "oldest"), (28, "older"), (25, "old")):
        _record(db_session, admin, key, dt.timedelta(hours=hours))
    _record(db_session, admin, "recent", dt.timedelta(hours=23))

    # Another token's keyed request purges the admin's expired records, oldest first, two at most.
    headers = auth("dispatcher", **{"Idempotency-Key": '"k1"'})
    assert client.post(URL, json=BODY, headers=headers).status_code == 201
    assert _keys(db_session) == {"old", "recent", "k1"}

    # Not again within PURGE_EVERY in this process ...
    purge_clock[0] += idempotency.PURGE_EVERY.total_seconds() - 1
    assert client.post(URL, json=BODY, headers=auth("dispatcher", **{"Idempotency-Key": '"k2"'})).status_code == 201
    assert _keys(db_session) == {"old", "recent", "k1", "k2"}

    # ... and once it has passed, the rest goes; records younger than 24 h stay.
    purge_clock[0] += 2
    assert client.post(URL, json=BODY, headers=auth("dispatcher", **{"Idempotency-Key": '"k3"'})).status_code == 201
    assert _keys(db_session) == {"recent", "k1", "k2", "k3"}
