"""Bounded work through the API (issue 14 §2): size limits, the hard time limit, per-token limits.

The computations run in the service's process pool (service.compute) even under Flask's test
client; the cross-worker behaviour is in tests/reliability/test_bounded_load.py.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import threading
import time

import pytest
from sqlalchemy import func, select

from service import bounded, compute, create_app
from service.persistence.db import dispose
from service.persistence.models import Plan, RequestQuota
from tests.reliability import slow_planner

JOINT = "/api/v1/calculations/joint"
TRUCK = "HV-R1"


@pytest.fixture
def client_with(database_url):
    """A test client of an app with these settings (on the test's database)."""
    apps = []

    def make(**overrides):
        app = create_app({"DATABASE_URL": database_url, "TESTING": True, **overrides})
        apps.append(app)
        return app.test_client()

    yield make
    for app in apps:
        dispose(app)


@pytest.fixture
def mid_window(monkeypatch):
    """The rate limit's clock stands 10 s into a 60 s window (no window ends during a test)."""
    start = (time.time() // bounded.WINDOW_SECONDS + 1) * bounded.WINDOW_SECONDS + 10
    monkeypatch.setattr(bounded, "_clock", lambda: start)
    return start


def site(i: int) -> dict:
    return {"code": f"S{i}", "demand_per_day": 200.0 + 50 * i, "holding_cost": 0.002, "stop_cost": 20.0,
            "tank_capacity": 20000.0}  # fmt: skip


def joint(n: int) -> dict:
    return {"dispatch_cost": 150.0, "truck_capacity": 30000.0, "max_stops": 6, "sites": [site(i) for i in range(n)]}


def active_plan(client, auth) -> int:
    plan = client.post(f"/api/v1/trucks/{TRUCK}/plans", json={}, headers=auth("dispatcher"))
    assert plan.status_code == 201, plan.get_data(as_text=True)
    assert client.post(f"/api/v1/plans/{plan.get_json()['id']}/activate", headers=auth("dispatcher")).status_code == 200
    return plan.get_json()["id"]


# --- size ------------------------------------------------------------------------------------


def test_more_sites_than_the_default_limit_is_422_naming_it(client, auth):
    # 1 001 sites: the default ULLAGE_MAX_PLAN_SITES is 1 000. The text is built by repetition.
    item = '{"code":"S%d","demand_per_day":10,"holding_cost":0.001,"stop_cost":1,"tank_capacity":1000}'
    text = '{"dispatch_cost":100,"sites":[' + ",".join(item % i for i in range(1001)) + "]}"
    response = client.post(JOINT, data=text, content_type="application/json", headers=auth("dispatcher"))
    assert response.status_code == 422, response.status_code
    problem = response.get_json()
    assert problem["type"].endswith("/too-many-sites")
    assert "at most 1000" in problem["detail"] and "ULLAGE_MAX_PLAN_SITES" in problem["detail"]
    assert [e["pointer"] for e in problem["errors"]] == ["#/sites"]


def test_the_site_limit_is_a_setting(client_with, auth):
    client = client_with(ULLAGE_MAX_PLAN_SITES="3")
    assert client.post(JOINT, json=joint(3), headers=auth("dispatcher")).status_code == 200
    refused = client.post(JOINT, json=joint(4), headers=auth("dispatcher"))
    assert refused.status_code == 422
    assert "4 sites" in refused.get_json()["detail"] and "at most 3" in refused.get_json()["detail"]
    assert client.get("/api/v1/settings", headers=auth("viewer")).get_json()["max_sites_per_calculation"] == 3


def test_a_plan_for_a_truck_over_the_site_limit_is_422_and_records_nothing(client_with, auth, demo, db_session):
    client = client_with(ULLAGE_MAX_PLAN_SITES="2")
    response = client.post(f"/api/v1/trucks/{TRUCK}/plans", json={}, headers=auth("dispatcher"))
    assert response.status_code == 422, response.get_data(as_text=True)
    assert response.get_json()["type"].endswith("/too-many-sites")
    assert "at most 2" in response.get_json()["detail"]
    assert db_session.scalar(select(func.count()).select_from(Plan)) == 0


def test_the_trips_window_cap_is_a_setting_named_in_the_422(client_with, auth, demo):
    client = client_with(ULLAGE_MAX_TRIPS_DAYS="40")
    active_plan(client, auth)
    first = dt.date.today()
    ok = client.get(f"/api/v1/trucks/{TRUCK}/trips?from={first}&to={first + dt.timedelta(days=39)}", headers=auth())
    assert ok.status_code == 200
    refused = client.get(
        f"/api/v1/trucks/{TRUCK}/trips?from={first}&to={first + dt.timedelta(days=40)}", headers=auth()
    )
    assert refused.status_code == 422
    assert "At most 40 days" in refused.get_json()["detail"] and "ULLAGE_MAX_TRIPS_DAYS" in refused.get_json()["detail"]


def test_a_long_window_from_the_pool_equals_the_workers_own_answer(client_with, auth, demo):
    here = client_with(ULLAGE_LONG_TRIPS_DAYS="92")  # every window in the request thread
    pooled = client_with(ULLAGE_LONG_TRIPS_DAYS="7")  # windows over 7 days in a pool child
    active_plan(here, auth)
    reading = {"level": 2000.0, "measured_at": dt.datetime.now(dt.UTC).isoformat()}
    assert here.post("/api/v1/sites/HV-GAR-02/readings", json=reading, headers=auth("dispatcher")).status_code == 201
    first = dt.date.today()
    query = f"/api/v1/trucks/{TRUCK}/trips?from={first}&to={first + dt.timedelta(days=60)}"
    expected, got = here.get(query, headers=auth()), pooled.get(query, headers=auth())
    assert expected.status_code == got.status_code == 200
    assert got.get_json() == expected.get_json() and got.get_json()["trips"]
    missing = pooled.get(f"/api/v1/trucks/NOPE/trips?from={first}&to={first + dt.timedelta(days=60)}", headers=auth())
    assert missing.status_code == 404 and missing.mimetype == "application/problem+json"


# --- time -------------------------------------------------------------------------------------


def test_a_runaway_planner_is_killed_at_the_hard_limit(client_with, auth, monkeypatch):
    monkeypatch.setattr("service.api.calculations.plan_joint", slow_planner.runaway)
    client = client_with(ULLAGE_PLAN_SECONDS="0.5", ULLAGE_PLAN_GRACE_SECONDS="0.5")
    settings = client.application.config["ULLAGE_SETTINGS"]
    pool = compute.pool(settings.plan_processes, settings.plan_queue, bounded.PRELOAD)
    answers, children = [], set()

    def post() -> None:
        answers.append(client.post(JOINT, json=joint(3), headers=auth("dispatcher")))

    thread = threading.Thread(target=post)
    started = time.monotonic()
    thread.start()
    while thread.is_alive() and time.monotonic() - started < 20:
        children.update(pool.pids())
        time.sleep(0.02)
    thread.join(slow_planner.RUNAWAY_SECONDS + 10)
    # The runaway would spin for 30 s; the hard limit is 1 s after the child starts.
    assert time.monotonic() - started < 20, "the request was not stopped at the hard limit"
    [response] = answers
    assert response.status_code == 503, response.get_data(as_text=True)
    problem = response.get_json()
    assert problem["type"].endswith("/planning-time-limit") and "0.5 s" in problem["detail"]
    assert response.headers["Retry-After"] == "1"
    assert children, "the computation never ran in a pool child"
    for pid in children:
        assert not os.path.exists(f"/proc/{pid}"), f"child {pid} still exists"


def test_the_budget_reaches_a_planner_that_takes_a_deadline(client_with, auth, monkeypatch):
    monkeypatch.setattr("service.api.calculations.plan_joint", slow_planner.anytime)
    client = client_with(ULLAGE_PLAN_SECONDS="7")
    response = client.post(JOINT, json=joint(3), headers=auth("dispatcher"))
    assert response.status_code == 200, response.get_data(as_text=True)
    assert "deadline_seconds=7.0" in response.get_json()["warnings"]


# --- per-token limits -------------------------------------------------------------------------------


def test_planning_is_limited_per_token_with_retry_after_and_admins_are_exempt(client_with, auth, mid_window):
    client = client_with(ULLAGE_PLANNING_PER_MINUTE="2")
    statuses = [client.post(JOINT, json=joint(2), headers=auth("dispatcher")).status_code for _ in range(2)]
    assert statuses == [200, 200]
    refused = client.post(JOINT, json=joint(2), headers=auth("dispatcher"))
    assert refused.status_code == 429
    assert refused.get_json()["type"].endswith("/rate-limited") and "At most 2 planning" in refused.get_json()["detail"]
    assert refused.headers["Retry-After"] == "50"  # 10 s into the 60 s window
    # Refused again without a database write, and a body the schema refuses is refused too (no parsing first).
    assert client.post(JOINT, json={"nonsense": 1}, headers=auth("dispatcher")).status_code == 429
    assert [client.post(JOINT, json=joint(2), headers=auth("admin")).status_code for _ in range(4)] == [200] * 4


def test_the_window_ends_and_the_count_starts_again(client_with, auth, mid_window, monkeypatch):
    client = client_with(ULLAGE_PLANNING_PER_MINUTE="1")
    assert client.post(JOINT, json=joint(2), headers=auth("dispatcher")).status_code == 200
    assert client.post(JOINT, json=joint(2), headers=auth("dispatcher")).status_code == 429
    monkeypatch.setattr(bounded, "_clock", lambda: mid_window + bounded.WINDOW_SECONDS)
    assert client.post(JOINT, json=joint(2), headers=auth("dispatcher")).status_code == 200


def test_a_replayed_plan_is_not_counted(client_with, auth, demo, mid_window):
    client = client_with(ULLAGE_PLANNING_PER_MINUTE="1")
    path = f"/api/v1/trucks/{TRUCK}/plans"
    first = client.post(path, json={}, headers=auth("dispatcher", **{"Idempotency-Key": '"one"'}))
    assert first.status_code == 201
    replay = client.post(path, json={}, headers=auth("dispatcher", **{"Idempotency-Key": '"one"'}))
    assert replay.status_code == 201 and replay.headers["Ullage-Replayed"] == "true"
    assert replay.get_json() == first.get_json()
    refused = client.post(path, json={}, headers=auth("dispatcher", **{"Idempotency-Key": '"two"'}))
    assert refused.status_code == 429 and 1 <= int(refused.headers["Retry-After"]) <= 60
    again = client.post(path, json={}, headers=auth("dispatcher", **{"Idempotency-Key": '"two"'}))
    assert again.status_code == 429  # the refused key was released, not left in progress (409)


def test_long_trips_windows_are_heavy_reads_short_and_cached_ones_are_free(client_with, auth, demo, mid_window):
    client = client_with(ULLAGE_HEAVY_READS_PER_MINUTE="1")
    active_plan(client, auth)
    today = dt.date.today()

    def window(start: int, days: int):
        first = today + dt.timedelta(days=start)
        return client.get(f"/api/v1/trucks/{TRUCK}/trips?from={first}&to={first + dt.timedelta(days=days - 1)}",
                          headers=auth("viewer"))  # fmt: skip

    assert window(0, 60).status_code == 200
    assert window(0, 60).status_code == 200  # the same window again: cached, not counted
    refused = window(1, 60)
    assert refused.status_code == 429 and "heavy reads" in refused.get_json()["detail"]
    assert [window(k, 35).status_code for k in range(5)] == [200] * 5  # up to 35 days is not heavy


def test_the_quota_counter_is_one_row_per_token_and_bucket(client_with, auth, mid_window, db_session):
    client = client_with(ULLAGE_PLANNING_PER_MINUTE="5")
    for _ in range(3):
        assert client.post(JOINT, json=joint(2), headers=auth("dispatcher")).status_code == 200
    rows = db_session.execute(select(RequestQuota.bucket, RequestQuota.hits, RequestQuota.window_start)).all()
    assert [tuple(r) for r in rows] == [("planning", 3, mid_window - 10)]


def test_429_and_503_are_documented(client, auth):
    spec = client.get("/api/v1/openapi.json", headers=auth("viewer")).get_json()
    for path, method in (
        (JOINT, "post"),
        ("/api/v1/trucks/{code}/plans", "post"),
        ("/api/v1/trucks/{code}/trips", "get"),
    ):
        responses = spec["paths"][path][method]["responses"]
        assert {"429", "503"} <= set(responses), (path, sorted(responses))
    assert json.dumps(spec).count("ULLAGE_MAX_PLAN_SITES") >= 2
