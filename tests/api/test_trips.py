"""GET /api/v1/trucks/{code}/trips: windows, 409 without an active plan, ETag, contract names (issue 4 §3)."""

from __future__ import annotations

import datetime as dt
import itertools
from collections import Counter

import pytest
from contract import UNCONSTRAINED_CALENDAR

from tests.api.one_truck import post_sites

START = dt.date(2026, 12, 7)  # Monday of ISO week 2026-W50
TRIP_FIELDS = {"date", "trip", "load", "stops", "route", "route_note"}  # issue 16: driving order
STOP_FIELDS = {
    "site",
    "sequence",  # issue 16: position in driving order
    "planned_quantity",
    "quantity",
    "projected_level_before",
    "warnings",
    # issue 15: a recorded delivery on the stop's date
    "delivered_quantity",
    "delivered_at",
}


@pytest.fixture
def network(client, auth):
    # Deliveries at 00:00 keep this file's arithmetic (issue 15's default shift_start is 06:00).
    truck = {
        "code": "T1",
        "name": "Truck",
        "dispatch_cost": 150.0,
        "capacity": 18000.0,
        "max_stops": 6,
        "shift_start": "00:00",
    }
    truck |= UNCONSTRAINED_CALENDAR  # these tests are about the listing, not the calendar
    assert client.post("/api/v1/trucks", json=truck, headers=auth("admin")).status_code == 201
    assert client.post("/api/v1/trucks", json=truck | {"code": "T2"}, headers=auth("admin")).status_code == 201
    post_sites(client, auth, (300.0, 120.0, 650.0, 90.0))


@pytest.fixture
def plan(client, auth, network):
    response = client.post(
        "/api/v1/trucks/T1/plans", json={"start_date": START.isoformat()}, headers=auth("dispatcher")
    )
    assert response.status_code == 201
    body = response.get_json()
    assert client.post(f"/api/v1/plans/{body['id']}/activate", headers=auth("dispatcher")).status_code == 200
    assert body["trips_truncated"] is False
    return body


def trips(client, auth, query, role="viewer", **headers):
    return client.get(f"/api/v1/trucks/T1/trips?{query}", headers=auth(role, **headers))


def expected_trips(plan, first: dt.date, last: dt.date):
    """Dated trips from the plan's own listing: day k of the calendar is start_date + k, repeating."""
    out = []
    day = first
    while day <= last:
        k = (day - START).days
        if k >= 0:
            for trip in plan["trips"]:
                if trip["day"] == k % plan["repeat_days"]:
                    out.append((day.isoformat(), tuple(sorted((s["code"], s["quantity"]) for s in trip["stops"]))))
        day += dt.timedelta(days=1)
    return out


def test_week_is_monday_to_sunday_with_contract_names(client, auth, plan):
    response = trips(client, auth, "week=2026-W50")
    assert response.status_code == 200
    body = response.get_json()
    assert set(body) == {"truck", "plan_id", "from", "to", "trips", "warnings"}
    assert body["truck"] == "T1" and body["plan_id"] == plan["id"]
    assert body["from"] == "2026-12-07" and body["to"] == "2026-12-13"
    assert dt.date.fromisoformat(body["from"]).isoweekday() == 1
    assert dt.date.fromisoformat(body["to"]).isoweekday() == 7
    assert body["trips"], "the plan delivers within a week"
    for trip in body["trips"]:
        assert set(trip) == TRIP_FIELDS
        assert body["from"] <= trip["date"] <= body["to"]
        for stop in trip["stops"]:
            assert set(stop) == STOP_FIELDS
            # Without readings: quantity is the planned one, and no projected level.
            assert stop["quantity"] == stop["planned_quantity"]
            assert stop["projected_level_before"] is None
            assert stop["warnings"] == []
        assert trip["load"] == pytest.approx(sum(s["quantity"] for s in trip["stops"]), rel=1e-9)
    for warning in body["warnings"]:
        assert set(warning) == {"kind", "message", "site", "date"}
    # No readings at all: every site is flagged as having no recent reading.
    assert {w["site"] for w in body["warnings"] if w["kind"] == "no_recent_reading"} == {"A0", "A1", "A2", "A3"}


def test_dates_follow_start_date_and_repeat(client, auth, plan):
    first, last = START - dt.timedelta(days=3), START + dt.timedelta(days=88)  # 92 days
    response = trips(client, auth, f"from={first}&to={last}")
    assert response.status_code == 200
    body = response.get_json()
    got = [(t["date"], tuple(sorted((s["site"], s["planned_quantity"]) for s in t["stops"]))) for t in body["trips"]]
    assert Counter(got) == Counter(expected_trips(plan, first, last))
    assert all(t["date"] >= START.isoformat() for t in body["trips"])  # nothing before the start date
    assert [t["date"] for t in body["trips"]] == sorted(t["date"] for t in body["trips"])
    # Every site is delivered every cycle_days days.
    cycles = {s["code"]: s["cycle_days"] for s in plan["sites"]}
    for code, cycle in cycles.items():
        dates = [dt.date.fromisoformat(t["date"]) for t in body["trips"] for s in t["stops"] if s["site"] == code]
        assert dates and all((b - a).days == cycle for a, b in itertools.pairwise(dates))


def test_week_53(client, auth, plan):
    response = trips(client, auth, "week=2026-W53")
    assert response.status_code == 200
    body = response.get_json()
    assert (body["from"], body["to"]) == ("2026-12-28", "2027-01-03")
    response = trips(client, auth, "week=2025-W53")
    assert response.status_code == 422
    assert response.mimetype == "application/problem+json"
    assert "#/query/week" in [e["pointer"] for e in response.get_json()["errors"]]


@pytest.mark.parametrize(
    "query",
    [
        "week=2026-W00",
        "week=2026-W54",
        "week=2026W50",
        "week=26-W50",
        "from=2026-12-07&to=2027-03-09",  # 93 days
        "from=2026-12-10&to=2026-12-09",
        "week=2026-W50&from=2026-12-07",
        "week=2026-W50&to=2026-12-07",
        "from=2026-12-07",
        "",
        "wek=2026-W50",
        "week=2026-W50&colour=red",
        "from=2026-13-01&to=2026-12-31",
    ],
)
def test_bad_windows_are_422(client, auth, plan, query):
    response = trips(client, auth, query)
    assert response.status_code == 422, query
    assert response.mimetype == "application/problem+json"
    assert response.get_json()["errors"][0]["pointer"].startswith("#/query/")


def test_92_days_ok_93_not(client, auth, plan):
    response = trips(client, auth, "from=2026-12-07&to=2027-03-08")
    assert response.status_code == 200
    assert (dt.date(2027, 3, 8) - dt.date(2026, 12, 7)).days + 1 == 92
    response = trips(client, auth, "from=2026-12-07&to=2027-03-09")
    assert response.status_code == 422
    assert "#/query/to" in [e["pointer"] for e in response.get_json()["errors"]]
    assert trips(client, auth, "from=2026-12-07&to=2026-12-07").status_code == 200


def test_no_active_plan_is_409(client, auth, network):
    response = trips(client, auth, "week=2026-W50")
    assert response.status_code == 409
    assert response.mimetype == "application/problem+json"
    problem = response.get_json()
    assert problem["status"] == 409 and "active plan" in problem["detail"]
    # A recorded but not activated plan is not enough.
    assert client.post("/api/v1/trucks/T1/plans", json={}, headers=auth("admin")).status_code == 201
    assert trips(client, auth, "week=2026-W50").status_code == 409
    assert client.get("/api/v1/trucks/NOPE/trips?week=2026-W50", headers=auth("viewer")).status_code == 404


def test_strong_etag_and_304(client, auth, plan):
    first = trips(client, auth, "week=2026-W50")
    etag = first.headers["ETag"]
    assert etag.startswith('"') and not etag.startswith("W/")
    again = trips(client, auth, "week=2026-W50")
    assert again.headers["ETag"] == etag and again.get_data() == first.get_data()
    cached = trips(client, auth, "week=2026-W50", **{"If-None-Match": etag})
    assert cached.status_code == 304 and cached.get_data() == b""
    assert cached.headers["ETag"] == etag
    assert trips(client, auth, "week=2026-W50", **{"If-None-Match": '"other"'}).status_code == 200
    assert trips(client, auth, "week=2026-W51").headers["ETag"] != etag
    # A reading changes the representation, so the tag.
    reading = {"level": 4000.0, "measured_at": "2026-12-01T08:00:00+00:00"}
    assert client.post("/api/v1/sites/A0/readings", json=reading, headers=auth("dispatcher")).status_code == 201
    changed = trips(client, auth, "week=2026-W50", **{"If-None-Match": etag})
    assert changed.status_code == 200 and changed.headers["ETag"] != etag


def test_stale_plan_is_flagged_in_warnings(client, auth, plan):
    assert not [w for w in trips(client, auth, "week=2026-W50").get_json()["warnings"] if w["kind"] == "plan_stale"]
    etag = client.get("/api/v1/sites/A1", headers=auth("admin")).headers["ETag"]
    assert (
        client.patch(
            "/api/v1/sites/A1", json={"stop_cost": 40.0}, headers=auth("admin", **{"If-Match": etag})
        ).status_code
        == 200
    )
    body = trips(client, auth, "week=2026-W50").get_json()
    stale = [w for w in body["warnings"] if w["kind"] == "plan_stale"]
    assert len(stale) == 1 and "A1" in stale[0]["message"]
    assert body["plan_id"] == plan["id"]  # still the active plan's trips


def test_old_reading_is_projected_and_said_so(client, auth, network):
    today = dt.datetime.now(dt.UTC).date()
    start = today - dt.timedelta(days=20)
    plan = client.post(
        "/api/v1/trucks/T1/plans", json={"start_date": start.isoformat()}, headers=auth("dispatcher")
    ).get_json()
    assert client.post(f"/api/v1/plans/{plan['id']}/activate", headers=auth("dispatcher")).status_code == 200
    reading = {"level": 5000.0, "measured_at": f"{start}T06:00:00+00:00"}  # 20 days old: not recent
    assert client.post("/api/v1/sites/A0/readings", json=reading, headers=auth("dispatcher")).status_code == 201
    body = trips(client, auth, f"from={today}&to={today + dt.timedelta(days=40)}").get_json()
    notices = {w["site"]: w["message"] for w in body["warnings"] if w["kind"] == "no_recent_reading"}
    assert set(notices) == {"A0", "A1", "A2", "A3"}
    assert "older reading" in notices["A0"] and "planned ones" in notices["A1"]
    a0 = [s for t in body["trips"] for s in t["stops"] if s["site"] == "A0"]
    assert a0 and all(s["projected_level_before"] is not None for s in a0)


def test_roles(client, auth, plan):
    for role in ("viewer", "dispatcher", "admin"):
        assert trips(client, auth, "week=2026-W50", role=role).status_code == 200
    assert client.get("/api/v1/trucks/T1/trips?week=2026-W50").status_code == 401


def test_reading_corrects_quantity(client, auth, network):
    # Readings may not be in the future, so this plan starts on the Monday of the current week.
    today = dt.datetime.now(dt.UTC).date()
    monday = today - dt.timedelta(days=today.weekday())
    plan = client.post(
        "/api/v1/trucks/T1/plans", json={"start_date": monday.isoformat()}, headers=auth("dispatcher")
    ).get_json()
    assert client.post(f"/api/v1/plans/{plan['id']}/activate", headers=auth("dispatcher")).status_code == 200
    # A0: demand 300/day, safe fill 9000, safety stock 500. Reading 2000 at 00:00 UTC of the start day.
    reading = {"level": 2000.0, "measured_at": f"{monday}T00:00:00+00:00"}
    assert client.post("/api/v1/sites/A0/readings", json=reading, headers=auth("dispatcher")).status_code == 201
    cycle = next(s["cycle_days"] for s in plan["sites"] if s["code"] == "A0")
    body = trips(client, auth, f"from={monday}&to={monday + dt.timedelta(days=60)}").get_json()
    stops = [(t["date"], t, s) for t in body["trips"] for s in t["stops"] if s["site"] == "A0"]
    assert len(stops) >= 2
    date, trip, stop = stops[0]
    days = (dt.date.fromisoformat(date) - monday).days
    level = max(0.0, 2000.0 - 300.0 * days)
    assert stop["projected_level_before"] == pytest.approx(level, abs=1e-6)
    others = sum(s["quantity"] for s in trip["stops"] if s["site"] != "A0")
    free = 18000.0 - others if trip["stops"][0]["site"] != "A0" else 18000.0
    expected = max(0.0, min(300.0 * cycle + 500.0 - level, 9000.0 - level, free))
    assert stop["quantity"] == pytest.approx(expected, abs=1e-6)
    # The next delivery starts from the delivered level minus the consumption in between.
    date2, _trip2, stop2 = stops[1]
    gap = (dt.date.fromisoformat(date2) - dt.date.fromisoformat(date)).days
    assert gap == cycle
    assert stop2["projected_level_before"] == pytest.approx(max(0.0, level + expected - 300.0 * gap), abs=1e-6)
    # The other sites have no reading: planned quantity and no projected level.
    for t in body["trips"]:
        for s in t["stops"]:
            if s["site"] != "A0":
                assert s["quantity"] == s["planned_quantity"] and s["projected_level_before"] is None


def test_cached_answer_follows_every_change_that_matters(client, auth, plan):
    # The trips answer is cached per process (service.api.plans.TRIPS_CACHE); a reading, a site edit
    # and an activation must each be visible on the very next call.
    first = trips(client, auth, "week=2026-W50").get_json()
    assert trips(client, auth, "week=2026-W50").get_json() == first
    reading = {"level": 9000.0, "measured_at": "2026-11-30T12:00:00+00:00"}
    assert client.post("/api/v1/sites/A0/readings", json=reading, headers=auth("dispatcher")).status_code == 201
    after_reading = trips(client, auth, "week=2026-W50").get_json()
    levels = [s["projected_level_before"] for t in after_reading["trips"] for s in t["stops"] if s["site"] == "A0"]
    assert (
        levels
        and levels[0] is not None
        and all(s["projected_level_before"] is None for t in first["trips"] for s in t["stops"])
    )
    etag = client.get("/api/v1/sites/A1", headers=auth("admin")).headers["ETag"]
    patched = client.patch("/api/v1/sites/A1", json={"stop_cost": 31.0}, headers=auth("admin", **{"If-Match": etag}))
    assert patched.status_code == 200
    kinds = [w["kind"] for w in trips(client, auth, "week=2026-W50").get_json()["warnings"]]
    assert "plan_stale" in kinds


def test_query_schemas_are_built_once_not_per_request(client, auth, plan, monkeypatch):
    # service.api.blueprint.Blueprint.arguments instantiates a schema class at import; webargs would
    # otherwise build one per request. Validation still happens on every request.
    from service.api.schemas.plans import TripsQueryArgsSchema

    built = []
    original = TripsQueryArgsSchema.__init__
    monkeypatch.setattr(
        TripsQueryArgsSchema, "__init__", lambda self, *a, **k: built.append(1) or original(self, *a, **k)
    )
    assert trips(client, auth, "week=2026-W50").status_code == 200
    assert trips(client, auth, "week=2026-W99").status_code == 422
    assert built == []

