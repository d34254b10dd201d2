"""GET /api/v1/trucks/{code}/trips: each trip's route in driving order from and back to the depot (issue 16)."""

from __future__ import annotations

import datetime as dt
import itertools

import pytest
from contract import UNCONSTRAINED_CALENDAR
from haversine import Unit, haversine

START = dt.date(2026, 12, 7)  # Monday of ISO week 2026-W50
DEPOT = {"code": "D-W", "name": "West depot", "latitude": 51.70, "longitude": -3.35}
# Invented places around the depot; one trip visits several of them.
PLACES = {"A0": (51.76, -3.41), "A1": (51.64, -3.30), "A2": (51.74, -3.28), "A3": (51.66, -3.44)}
CIRCUITY = 1.3  # the service's default circuity factor (common practice)


def road_km(a, b) -> float:
    # Reference: the `haversine` package (great-circle distance, mean Earth radius) × circuity.
    return CIRCUITY * haversine(a, b, unit=Unit.KILOMETERS)


@pytest.fixture
def network(client, auth):
    assert client.post("/api/v1/depots", json=DEPOT, headers=auth("admin")).status_code == 201
    truck = {
        "code": "T1",
        "name": "Truck",
        "dispatch_cost": 900.0,  # dear trips: several stops share one
        "capacity": 30000.0,
        "max_stops": 6,
        "shift_start": "00:00",
        "depot": "D-W",
    } | UNCONSTRAINED_CALENDAR
    assert client.post("/api/v1/trucks", json=truck, headers=auth("admin")).status_code == 201
    for code, (lat, lon) in PLACES.items():
        site = {
            "code": code,
            "name": f"Site {code}",
            "truck": "T1",
            "demand_per_day": 300.0,
            "holding_cost": 0.001,
            "stop_cost": 30.0,
            "tank_capacity": 10000.0,
            "safety_stock": 500.0,
            "latitude": lat,
            "longitude": lon,
        }
        assert client.post("/api/v1/sites", json=site, headers=auth("admin")).status_code == 201


def activate(client, auth) -> None:
    body = client.post("/api/v1/trucks/T1/plans", json={"start_date": START.isoformat()}, headers=auth("dispatcher"))
    assert body.status_code == 201, body.get_json()
    plan_id = body.get_json()["id"]
    assert client.post(f"/api/v1/plans/{plan_id}/activate", headers=auth("dispatcher")).status_code == 200


def week(client, auth) -> list[dict]:
    response = client.get("/api/v1/trucks/T1/trips?week=2026-W50", headers=auth("viewer"))
    assert response.status_code == 200, response.get_json()
    return response.get_json()["trips"]


def test_every_trip_lists_its_stops_in_driving_order_with_leg_distances(client, auth, network):
    activate(client, auth)
    trips = week(client, auth)
    assert trips and max(len(t["stops"]) for t in trips) >= 2
    places = {"D-W": (DEPOT["latitude"], DEPOT["longitude"]), **PLACES}
    for trip in trips:
        route, codes = trip["route"], [s["site"] for s in trip["stops"]]
        assert trip["route_note"] is None and route["depot"] == "D-W" and route["exact"] is True
        assert codes == sorted(codes)  # `stops` keep the plan's (site code) order
        assert sorted(route["stops"]) == codes
        assert [s["sequence"] for s in trip["stops"]] == [route["stops"].index(c) + 1 for c in codes]
        path = ["D-W", *route["stops"], "D-W"]
        assert [(leg["from"], leg["to"]) for leg in route["legs"]] == list(itertools.pairwise(path))
        for leg in route["legs"]:
            assert leg["km"] == pytest.approx(road_km(places[leg["from"]], places[leg["to"]]), abs=2e-3)
        assert route["km"] == pytest.approx(sum(leg["km"] for leg in route["legs"]), abs=1e-2)
        # The shortest closed tour, by enumerating every order of the trip's stops.
        best = min(
            sum(road_km(places[a], places[b]) for a, b in itertools.pairwise(["D-W", *order, "D-W"]))
            for order in itertools.permutations(codes)
        )
        assert route["km"] == pytest.approx(best, abs=2e-3)


def test_a_site_without_coordinates_keeps_the_plan_order_and_says_so(client, auth, network):
    site = client.get("/api/v1/sites/A2", headers=auth("admin"))
    patched = client.patch(
        "/api/v1/sites/A2",
        json={"latitude": None, "longitude": None},
        headers=auth("admin", **{"If-Match": site.headers["ETag"]}),
    )
    assert patched.status_code == 200, patched.get_json()
    activate(client, auth)
    trips = week(client, auth)
    with_a2 = [t for t in trips if "A2" in [s["site"] for s in t["stops"]]]
    assert with_a2
    for trip in trips:
        if trip in with_a2:
            assert trip["route"] is None and "A2" in trip["route_note"]
            assert all(s["sequence"] is None for s in trip["stops"])
        else:
            assert trip["route"] is not None and trip["route_note"] is None


def test_a_truck_without_depot_gets_no_route_and_the_reason(client, auth, network):
    truck = client.get("/api/v1/trucks/T1", headers=auth("admin"))
    patched = client.patch(
        "/api/v1/trucks/T1", json={"depot": None}, headers=auth("admin", **{"If-Match": truck.headers["ETag"]})
    )
    assert patched.status_code == 200, patched.get_json()
    activate(client, auth)
    trips = week(client, auth)
    assert trips
    for trip in trips:
        assert trip["route"] is None and "no depot" in trip["route_note"]


def test_moving_the_depot_changes_the_cached_routes(client, auth, network):
    activate(client, auth)
    before = week(client, auth)
    depot = client.get("/api/v1/depots/D-W", headers=auth("admin"))
    moved = client.patch(
        "/api/v1/depots/D-W", json={"latitude": 51.80}, headers=auth("admin", **{"If-Match": depot.headers["ETag"]})
    )
    assert moved.status_code == 200, moved.get_json()
    after = week(client, auth)
    first = after[0]["route"]["legs"][0]
    expected = road_km((51.80, DEPOT["longitude"]), PLACES[first["to"]])
    assert first["km"] == pytest.approx(expected, abs=2e-3)
    assert first["km"] != before[0]["route"]["legs"][0]["km"]


def test_a_recorded_plan_lists_each_trip_with_its_route(client, auth, network):
    body = client.post("/api/v1/trucks/T1/plans", json={"start_date": START.isoformat()}, headers=auth("dispatcher"))
    assert body.status_code == 201, body.get_json()
    for answer in (
        body.get_json(),
        client.get(f"/api/v1/plans/{body.get_json()['id']}", headers=auth("viewer")).get_json(),
    ):
        assert answer["trips"]
        places = {"D-W": (DEPOT["latitude"], DEPOT["longitude"]), **PLACES}
        for trip in answer["trips"]:
            route, codes = trip["route"], [s["code"] for s in trip["stops"]]
            assert trip["route_note"] is None and sorted(route["stops"]) == sorted(codes)
            best = min(
                sum(road_km(places[a], places[b]) for a, b in itertools.pairwise(["D-W", *order, "D-W"]))
                for order in itertools.permutations(codes)
            )
            assert route["km"] == pytest.approx(best, abs=2e-3)
