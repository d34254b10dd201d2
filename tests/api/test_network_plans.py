"""Issue 16's network plan job: POST /network-plans (202 + Location), polling, the result, activation.

The network is an invented scenario (two depots, three trucks, eight sites in an invented region).
Jobs are run synchronously here with the worker's own ``run_once`` (the same code the worker threads
and ``ullage worker`` loop over), so no test waits on a clock.
"""

from __future__ import annotations

import datetime as dt
import threading
import time

import pytest
from haversine import haversine
from sqlalchemy import select, update

from service import cli
from service.network_worker import Worker
from service.persistence import network_jobs as jobs
from service.persistence.models import NetworkPlanJob, Plan, Site, Truck

NETWORK_PLANS = "/api/v1/network-plans"
#: docs/fleet.md §2: road distance = great-circle distance × 1.3 (the default circuity factor).
CIRCUITY = 1.3
DEPOTS = [
    {"code": "D-N", "name": "North rack", "latitude": 52.40, "longitude": 5.00},
    {"code": "D-S", "name": "South rack", "latitude": 52.00, "longitude": 5.10},
]
PRODUCTS = [{"code": "DSL", "name": "Diesel", "safe_fill": 0.95}, {"code": "LPG", "name": "Propane", "safe_fill": 0.8}]
TRUCKS = [
    {"code": "T-N", "depot": "D-N", "capacity": 18000.0, "compartments": [10000.0, 8000.0], "products": ["DSL"]},
    {"code": "T-S", "depot": "D-S", "capacity": 18000.0, "compartments": [9000.0, 9000.0], "products": ["DSL", "LPG"]},
    {"code": "T-L", "depot": "D-S", "capacity": 12000.0, "compartments": None, "products": ["LPG"]},
]
# code, truck now, product, latitude, longitude, demand per day
SITES = [
    ("S-01", "T-N", "DSL", 52.45, 5.05, 600.0),
    ("S-02", "T-N", "DSL", 52.38, 4.92, 450.0),
    ("S-03", "T-N", "DSL", 52.20, 5.02, 500.0),
    ("S-04", "T-S", "DSL", 52.05, 5.20, 700.0),
    ("S-05", "T-S", "DSL", 51.95, 5.00, 350.0),
    ("S-06", "T-S", "LPG", 52.02, 5.15, 300.0),
    ("S-07", "T-L", "LPG", 51.98, 5.22, 250.0),
    ("S-08", "T-L", "LPG", 52.10, 5.08, 400.0),
]
STOP_COST = 25.0
UNCONSTRAINED = {"working_days": [1, 2, 3, 4, 5, 6, 7], "trips_per_day": 4}


def _post(client, auth, path, body, status=201, role="admin", **headers):
    response = client.post(path, json=body, headers=auth(role, **headers))
    assert response.status_code == status, response.get_json()
    return response


@pytest.fixture
def fleet(client, auth):
    for depot in DEPOTS:
        _post(client, auth, "/api/v1/depots", depot)
    for product in PRODUCTS:
        _post(client, auth, "/api/v1/products", product)
    for t in TRUCKS:
        body = {"name": t["code"], "dispatch_cost": 120.0, "cost_per_km": 1.5, **UNCONSTRAINED, **t}
        _post(client, auth, "/api/v1/trucks", body)
    for code, truck, product, lat, lon, demand in SITES:
        site = {
            "code": code, "name": code, "truck": truck, "product": product, "latitude": lat, "longitude": lon,
            "demand_per_day": demand, "holding_cost": 0.002, "stop_cost": STOP_COST, "tank_capacity": 12000.0,
        }  # fmt: skip
        _post(client, auth, "/api/v1/sites", site)


@pytest.fixture
def run_jobs(app):
    worker = Worker(app.config["ULLAGE_SETTINGS"], name="test-worker")
    yield worker.run_once
    worker.close()


def _start(client, auth, body=None, **headers):
    response = _post(client, auth, NETWORK_PLANS, body or {"start_date": "2026-01-05"}, 202, "dispatcher", **headers)
    return response


def _done(client, auth, run_jobs) -> dict:
    response = _start(client, auth)
    job_id = response.get_json()["id"]
    assert run_jobs() == job_id
    body = client.get(response.headers["Location"], headers=auth("viewer")).get_json()
    assert body["status"] == "done", body
    return body


def test_post_answers_202_with_location_then_done(client, auth, fleet, run_jobs):
    response = _start(client, auth)
    body = response.get_json()
    assert response.headers["Location"] == f"{NETWORK_PLANS}/{body['id']}"
    assert (body["status"], body["progress"], body["estimated_seconds_left"], body["result"]) == (
        "queued",
        0.0,
        None,
        None,
    )
    assert body["trucks"] == ["T-L", "T-N", "T-S"] and body["site_count"] == len(SITES)
    polled = client.get(response.headers["Location"], headers=auth("viewer"))
    assert polled.status_code == 200 and polled.get_json()["status"] == "queued" and polled.headers["ETag"]
    assert run_jobs() == body["id"]
    assert run_jobs() is None  # nothing else queued
    done = client.get(response.headers["Location"], headers=auth("viewer")).get_json()
    assert (done["status"], done["progress"], done["estimated_seconds_left"], done["error"]) == ("done", 1.0, 0.0, None)
    assert done["started_at"] and done["finished_at"] and done["elapsed_seconds"] >= 0
    assert done["attempts"] == 1
    result = done["result"]
    for key in ("assignment", "trucks", "cost_per_day", "lower_bound_per_day", "gap", "unserved", "cost_breakdown"):
        assert key in result


def test_result_invariants(client, auth, fleet, run_jobs):
    result = _done(client, auth, run_jobs)["result"]
    trucks = {t["code"]: t for t in TRUCKS}
    depots = {d["code"]: (d["latitude"], d["longitude"]) for d in DEPOTS}
    sites = {s[0]: s for s in SITES}
    # Every site is served by exactly one truck that carries its product, or listed as unserved.
    unserved = {u["code"] for u in result["unserved"]}
    assert set(result["assignment"]) | unserved == set(sites) and not set(result["assignment"]) & unserved
    for code, truck in result["assignment"].items():
        assert sites[code][2] in trucks[truck]["products"]
    total = 0.0
    for plan in result["trucks"]:
        truck = trucks[plan["truck"]]
        assert plan["depot"] == truck["depot"]
        assert {s["code"] for s in plan["sites"]} == {c for c, t in result["assignment"].items() if t == plan["truck"]}
        home = depots[truck["depot"]]
        trip_costs = 0.0
        for trip in plan["trips"]:
            # Driving order from and back to the depot: leg lengths re-derived with the `haversine`
            # package (mean Earth radius 6 371.0088 km) × the circuity factor.
            places = [home, *[(sites[s["code"]][3], sites[s["code"]][4]) for s in trip["stops"]], home]
            legs = [CIRCUITY * haversine(a, b) for a, b in zip(places, places[1:], strict=False)]
            assert [s["leg_km"] for s in trip["stops"]] + [trip["return_km"]] == pytest.approx(legs, rel=1e-6)
            assert trip["distance_km"] == pytest.approx(sum(legs), rel=1e-6)
            cost = 120.0 + 1.5 * trip["distance_km"] + STOP_COST * len(trip["stops"])
            assert trip["cost"] == pytest.approx(cost, rel=1e-9)
            trip_costs += trip["cost"]
            # Each stop's load sits in the truck's compartments (numbered from 1), one product per compartment.
            capacities = truck["compartments"] or [truck["capacity"]]
            used: dict[int, str] = {}
            for stop in trip["stops"]:
                assert sum(q for _, q in stop["compartments"]) == pytest.approx(stop["quantity"])
                for number, quantity in stop["compartments"]:
                    assert 1 <= number <= len(capacities) and quantity <= capacities[int(number) - 1] + 1e-6
                    assert used.setdefault(int(number), sites[stop["code"]][2]) == sites[stop["code"]][2]
        if not plan["trips_truncated"]:
            holding = plan["cost_breakdown"]["holding"]
            assert plan["cost_per_day"] == pytest.approx(trip_costs / plan["repeat_days"] + holding, rel=1e-6)
        assert plan["cost_per_day"] == pytest.approx(sum(plan["cost_breakdown"].values()), rel=1e-9)
        assert 0 < plan["utilisation"]["load_share"] <= 1 + 1e-9
        total += plan["cost_per_day"]
    assert sum(len(p["trips"]) for p in result["trucks"]) >= 2
    assert result["cost_per_day"] == pytest.approx(total, rel=1e-9)
    assert 0 < result["lower_bound_per_day"] <= result["cost_per_day"] * (1 + 1e-9)
    assert result["gap"] == pytest.approx(result["cost_per_day"] / result["lower_bound_per_day"] - 1, rel=1e-6)


def test_sites_without_coordinates_and_trucks_without_depot_are_named(client, auth, fleet, db_session):
    db_session.execute(update(Site).where(Site.code.in_(["S-02", "S-07"])).values(latitude=None, longitude=None))
    db_session.commit()
    response = client.post(NETWORK_PLANS, json={}, headers=auth("dispatcher"))
    assert response.status_code == 422 and response.mimetype == "application/problem+json"
    body = response.get_json()
    assert body["type"].endswith("/planning-input") and body["sites"] == ["S-02", "S-07"]
    assert "S-02" in body["detail"] and "S-07" in body["detail"]
    db_session.execute(update(Truck).where(Truck.code == "T-L").values(depot=None))
    db_session.commit()
    body = client.post(NETWORK_PLANS, json={"trucks": ["T-L"]}, headers=auth("dispatcher")).get_json()
    assert body["trucks"] == ["T-L"] and body["sites"] == ["S-07"] and "T-L" in body["detail"]
    assert db_session.scalar(select(NetworkPlanJob.id)) is None


def test_unknown_truck_is_a_422(client, auth, fleet):
    response = client.post(NETWORK_PLANS, json={"trucks": ["NOPE"]}, headers=auth("dispatcher"))
    assert response.status_code == 422 and response.get_json()["errors"][0]["pointer"] == "#/trucks"


def test_idempotent_replay_gives_the_same_job(client, auth, fleet, db_session):
    first = _start(client, auth, **{"Idempotency-Key": "network-1"})
    again = _start(client, auth, **{"Idempotency-Key": "network-1"})
    assert again.headers.get("Ullage-Replayed") == "true"
    assert again.get_json()["id"] == first.get_json()["id"] and again.headers["Location"] == first.headers["Location"]
    assert len(db_session.scalars(select(NetworkPlanJob.id)).all()) == 1


def test_roles(client, auth, fleet, run_jobs):
    assert client.post(NETWORK_PLANS, json={}, headers=auth("viewer")).status_code == 403
    job_id = _start(client, auth).get_json()["id"]
    assert client.get(f"{NETWORK_PLANS}/{job_id}", headers=auth("viewer")).status_code == 200
    assert client.get(NETWORK_PLANS, headers=auth("viewer")).get_json()["items"][0]["id"] == job_id
    run_jobs()
    assert client.post(f"{NETWORK_PLANS}/{job_id}/activate", headers=auth("viewer")).status_code == 403
    assert client.get(f"{NETWORK_PLANS}/{job_id}").status_code == 401


def test_activation_applies_everything_in_one_go(client, auth, fleet, run_jobs, db_session):
    done = _done(client, auth, run_jobs)
    before = {s.code: s.version for s in db_session.scalars(select(Site))}
    response = client.post(f"{NETWORK_PLANS}/{done['id']}/activate", headers=auth("dispatcher"))
    assert response.status_code == 200, response.get_json()
    body = response.get_json()
    assert body["activated_by"] == "test-dispatcher" and body["activated_at"]
    db_session.expire_all()
    truck_ids = {t.code: t.id for t in db_session.scalars(select(Truck))}
    assignment = done["result"]["assignment"]
    for site in db_session.scalars(select(Site)):
        if site.code in assignment:
            assert site.truck_id == truck_ids[assignment[site.code]]
            moved = SITES[[s[0] for s in SITES].index(site.code)][1] != assignment[site.code]
            assert site.version == before[site.code] + (1 if moved else 0)
    active = db_session.scalars(select(Plan).where(Plan.status == "active")).all()
    assert sorted(p.id for p in active) == sorted(body["plans"])
    planned = {p["truck"]: p for p in done["result"]["trucks"]}
    for plan in active:
        code = next(c for c, i in truck_ids.items() if i == plan.truck_id)
        recorded = client.get(f"/api/v1/plans/{plan.id}", headers=auth("viewer")).get_json()
        # The recorded plan stores the truck plan's per-site patterns, and is not stale after the move.
        assert recorded["sites"] == planned[code]["sites"] and recorded["stale"] is False
        trips = client.get(f"/api/v1/trucks/{code}/trips?from=2026-01-05&to=2026-01-18", headers=auth("viewer"))
        assert trips.status_code == 200 and trips.get_json()["plan_id"] == plan.id
    again = client.post(f"{NETWORK_PLANS}/{done['id']}/activate", headers=auth("dispatcher"))
    assert again.status_code == 409 and again.get_json()["type"].endswith("/conflict")


def _unchanged(db_session) -> tuple:
    db_session.expire_all()
    sites = sorted((s.code, s.truck_id, s.version) for s in db_session.scalars(select(Site)))
    plans = sorted((p.id, p.status) for p in db_session.scalars(select(Plan)))
    return sites, plans


def test_activation_refuses_changed_sites_and_applies_nothing(client, auth, fleet, run_jobs, db_session):
    done = _done(client, auth, run_jobs)
    etag = client.get("/api/v1/sites/S-05", headers=auth()).headers["ETag"]
    patched = client.patch("/api/v1/sites/S-05", json={"stop_cost": 30.0}, headers=auth("admin", **{"If-Match": etag}))
    assert patched.status_code == 200
    before = _unchanged(db_session)
    response = client.post(f"{NETWORK_PLANS}/{done['id']}/activate", headers=auth("dispatcher"))
    assert response.status_code == 409
    body = response.get_json()
    assert body["type"].endswith("/inputs-changed") and body["sites"] == ["S-05"] and "S-05" in body["detail"]
    assert _unchanged(db_session) == before
    assert client.get(f"{NETWORK_PLANS}/{done['id']}", headers=auth()).get_json()["activated_at"] is None


def test_a_failure_midway_leaves_everything_as_it_was(client, auth, fleet, run_jobs, db_session, monkeypatch):
    from service.persistence import plans as plan_store  # noqa: PLC0415

    done = _done(client, auth, run_jobs)
    before = _unchanged(db_session)
    real, calls = plan_store.activate, []

    def second_fails(session, plan):
        calls.append(plan.id)
        if len(calls) == 2:
            raise RuntimeError("disk gone")
        return real(session, plan)

    monkeypatch.setattr(plan_store, "activate", second_fails)
    response = client.post(f"{NETWORK_PLANS}/{done['id']}/activate", headers=auth("dispatcher"))
    assert response.status_code == 500 and len(calls) == 2
    assert _unchanged(db_session) == before
    monkeypatch.setattr(plan_store, "activate", real)
    assert client.post(f"{NETWORK_PLANS}/{done['id']}/activate", headers=auth("dispatcher")).status_code == 200


def test_a_job_whose_worker_died_is_reported_failed(client, auth, fleet, db_session, app):
    job_id = _start(client, auth).get_json()["id"]
    assert jobs.claim_next(db_session, "dead-worker") == job_id
    assert jobs.claim_next(db_session, "other-worker") is None  # claimed once
    db_session.commit()
    lease = app.config["ULLAGE_SETTINGS"].network_lease_seconds
    old = dt.datetime.now(dt.UTC) - dt.timedelta(seconds=lease + 5)
    db_session.execute(update(NetworkPlanJob).where(NetworkPlanJob.id == job_id).values(heartbeat_at=old))
    db_session.commit()
    body = client.get(f"{NETWORK_PLANS}/{job_id}", headers=auth("viewer")).get_json()
    assert body["status"] == "failed" and "heartbeat" in body["error"] and body["result"] is None
    # The dead worker's late result is dropped; the job stays failed and cannot be activated.
    assert not jobs.finish(db_session, job_id, "dead-worker", result={"x": 1})
    db_session.commit()
    response = client.post(f"{NETWORK_PLANS}/{job_id}/activate", headers=auth("dispatcher"))
    assert response.status_code == 409


def test_a_stale_job_is_failed_by_the_next_worker(client, auth, fleet, db_session, app, run_jobs):
    job_id = _start(client, auth).get_json()["id"]
    jobs.claim_next(db_session, "dead-worker")
    old = dt.datetime.now(dt.UTC) - dt.timedelta(hours=1)
    db_session.execute(update(NetworkPlanJob).where(NetworkPlanJob.id == job_id).values(heartbeat_at=old))
    db_session.commit()
    assert run_jobs() is None
    db_session.expire_all()
    assert db_session.get(NetworkPlanJob, job_id).status == "failed"


def test_a_worker_thread_runs_the_job_while_requests_are_served(client, auth, fleet, app):
    worker, stop = Worker(app.config["ULLAGE_SETTINGS"], name="thread-worker"), threading.Event()
    thread = threading.Thread(target=worker.loop, args=(stop,), daemon=True)
    thread.start()
    try:
        location = _start(client, auth).headers["Location"]
        seen = set()
        for _ in range(600):  # at most about a minute; ends as soon as the job is done
            body = client.get(location, headers=auth("viewer")).get_json()
            seen.add(body["status"])
            if body["status"] in ("done", "failed"):
                break
            time.sleep(0.1)
        assert body["status"] == "done" and body["result"]["assignment"], body
        assert body["created_by"] == "test-dispatcher" and seen <= {"queued", "running", "done"}
    finally:
        stop.set()
        thread.join(timeout=30)
        worker.close()


def test_the_worker_command_runs_the_queued_jobs(client, auth, fleet, app, monkeypatch, capsys):
    first = _start(client, auth).get_json()["id"]
    second = _start(client, auth, {"trucks": ["T-N"]}).get_json()["id"]
    monkeypatch.setenv("DATABASE_URL", app.config["DATABASE_URL"])
    assert cli.main(["worker", "--once"]) == 0
    for job_id in (first, second):
        body = client.get(f"{NETWORK_PLANS}/{job_id}", headers=auth("viewer")).get_json()
        assert body["status"] == "done"
    assert set(body["result"]["assignment"].values()) == {"T-N"} and body["trucks"] == ["T-N"]


def test_a_worker_that_stops_gracefully_hands_its_job_back(client, auth, fleet, app, db_session, run_jobs):
    job_id = _start(client, auth).get_json()["id"]
    stopping = Worker(app.config["ULLAGE_SETTINGS"], name="recycled-worker")
    try:
        assert jobs.claim_next(db_session, stopping.name) == job_id
        db_session.commit()
        stopping.current = job_id  # as while its computation runs
        assert stopping.release() == "queued"
    finally:
        stopping.close()
    body = client.get(f"{NETWORK_PLANS}/{job_id}", headers=auth("viewer")).get_json()
    assert (body["status"], body["progress"], body["started_at"]) == ("queued", 0.0, None)
    assert run_jobs() == job_id
    body = client.get(f"{NETWORK_PLANS}/{job_id}", headers=auth("viewer")).get_json()
    assert (body["status"], body["attempts"]) == ("done", 2)


def test_a_job_handed_back_too_often_fails(client, auth, fleet, db_session):
    job_id = _start(client, auth).get_json()["id"]
    for attempt in range(1, 4):
        assert jobs.claim_next(db_session, f"w{attempt}") == job_id
        assert jobs.requeue(db_session, job_id, f"w{attempt}", max_attempts=3) == (
            "queued" if attempt < 3 else "failed"
        )
        db_session.commit()
    body = client.get(f"{NETWORK_PLANS}/{job_id}", headers=auth("viewer")).get_json()
    assert body["status"] == "failed" and "stopped 3 times" in body["error"]
    assert jobs.requeue(db_session, job_id, "w3", max_attempts=3) is None


def test_the_list_pages_newest_first_without_results(client, auth, fleet, run_jobs):
    """GET /network-plans: keyset pages (RFC 8288 `Link: rel="next"`), newest first, no `result`."""
    first = _done(client, auth, run_jobs)
    second = _start(client, auth, {"start_date": "2026-01-12"}).get_json()  # still queued
    page = client.get(f"{NETWORK_PLANS}?limit=1", headers=auth("viewer"))
    assert page.status_code == 200
    [newest] = page.get_json()["items"]
    assert (newest["id"], newest["status"], "result" in newest) == (second["id"], "queued", False)
    link = page.headers["Link"]
    assert link.endswith('>; rel="next"')
    rest = client.get(link[1 : link.index(">")], headers=auth("viewer"))
    [older] = rest.get_json()["items"]
    assert (older["id"], older["status"], "result" in older) == (first["id"], "done", False)
    assert older["site_count"] == len(SITES) and older["trucks"] == first["trucks"]
    assert "Link" not in rest.headers
