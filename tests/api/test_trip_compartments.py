"""GET /api/v1/trucks/{code}/trips on a truck with compartments: one product per compartment (issue 16).

A plan is recorded and activated per truck as before; the weekly trips then split a date's stops so
that each trip's loads by product fit the compartments, and each stop says which compartments hold
its load. The scenario (products, sites, quantities) is invented. The fit is checked against the
definition by enumerating every assignment of compartments to products (itertools.product, Python
standard library), not with the service's own search.
"""

from __future__ import annotations

import datetime as dt
import itertools
import math

import pytest
from contract import UNCONSTRAINED_CALENDAR

START = dt.date(2026, 12, 7)  # Monday of ISO week 2026-W50
COMPARTMENTS = [6000.0, 6000.0, 6000.0]
PRODUCTS = [
    {"code": "KER", "name": "Heating oil", "safe_fill": 0.95},
    {"code": "DSL", "name": "Diesel", "safe_fill": 0.95},
]
# Heating oil: three sites whose joint deliveries on a date exceed one compartment (6000 L);
# diesel: two sites. A dear dispatch makes the plan serve many sites per trip.
SITES = {"K1": ("KER", 750.0), "K2": ("KER", 750.0), "K3": ("KER", 700.0), "D1": ("DSL", 300.0), "D2": ("DSL", 250.0)}


def _post(client, auth, path, body):
    response = client.post(path, json=body, headers=auth("admin"))
    assert response.status_code == 201, response.get_json()


@pytest.fixture
def network(client, auth):
    for product in PRODUCTS:
        _post(client, auth, "/api/v1/products", product)
    truck = {
        "code": "T1",
        "name": "Three compartments",
        "dispatch_cost": 2000.0,
        "capacity": sum(COMPARTMENTS),
        "compartments": COMPARTMENTS,
        "max_stops": 6,
        "shift_start": "00:00",
    } | UNCONSTRAINED_CALENDAR
    _post(client, auth, "/api/v1/trucks", truck)
    for code, (product, demand) in SITES.items():
        site = {
            "code": code,
            "name": f"Site {code}",
            "truck": "T1",
            "product": product,
            "demand_per_day": demand,
            "holding_cost": 0.0005,
            "stop_cost": 10.0,
            "tank_capacity": 12000.0,
            "safety_stock": 500.0,
        }
        _post(client, auth, "/api/v1/sites", site)


def _activate(client, auth) -> None:
    body = client.post("/api/v1/trucks/T1/plans", json={"start_date": START.isoformat()}, headers=auth("dispatcher"))
    assert body.status_code == 201, body.get_json()
    plan_id = body.get_json()["id"]
    assert client.post(f"/api/v1/plans/{plan_id}/activate", headers=auth("dispatcher")).status_code == 200


def _loads_fit(loads: dict[str, float], caps: list[float]) -> bool:
    """Whether some assignment of each compartment to one product (or none) holds every load."""
    names = sorted(loads)
    for owner in itertools.product([None, *names], repeat=len(caps)):
        if all(sum(c for c, o in zip(caps, owner, strict=True) if o == p) >= loads[p] - 1e-6 for p in names):
            return True
    return False


def test_every_weekly_trip_loads_one_product_per_compartment(client, auth, network):
    _activate(client, auth)
    response = client.get("/api/v1/trucks/T1/trips?from=2026-12-07&to=2026-12-27", headers=auth("viewer"))
    assert response.status_code == 200, response.get_json()
    body = response.get_json()
    product = {code: p for code, (p, _) in SITES.items()}
    by_date: dict[str, list[dict]] = {}
    for trip in body["trips"]:
        by_date.setdefault(trip["date"], []).append(trip)
        loads: dict[str, float] = {}
        held = [0.0] * len(COMPARTMENTS)
        owner: dict[int, str] = {}
        for stop in trip["stops"]:
            loads[product[stop["site"]]] = loads.get(product[stop["site"]], 0.0) + stop["quantity"]
            pieces = stop["compartments"]
            assert sum(q for _, q in pieces) == pytest.approx(stop["quantity"], abs=1e-6)
            for number, quantity in pieces:
                c = int(number) - 1  # numbered from 1, as a network plan's stops
                held[c] += quantity
                # One product per compartment.
                assert owner.setdefault(c, product[stop["site"]]) == product[stop["site"]]
        assert all(h <= cap + 1e-6 for h, cap in zip(held, COMPARTMENTS, strict=True))
        assert _loads_fit(loads, COMPARTMENTS)
        assert trip["load"] <= sum(COMPARTMENTS) + 1e-6 and len(trip["stops"]) <= 6
    # The scenario needs the split: some date has more trips than capacity and max_stops alone need
    # (⌈load / W⌉ and ⌈stops / S⌉; the listing packs into exactly that many here). Worked by hand for
    # the plan's 12-day cycle: 33 000 L on its date, two trips by capacity, {K1 9000, D1 3600, D2 3000}
    # and {K2 9000, K3 8400}; the first needs two compartments of each product (four of three), so
    # it splits into {D1, K1} and {D2}.
    split = [
        trips
        for trips in by_date.values()
        if len(trips)
        > max(
            math.ceil(sum(t["load"] for t in trips) / sum(COMPARTMENTS)),
            math.ceil(sum(len(t["stops"]) for t in trips) / 6),
        )
    ]
    assert split, {d: [[(s["site"], s["quantity"]) for s in t["stops"]] for t in ts] for d, ts in by_date.items()}
    first = by_date[START.isoformat()]
    assert [sorted(s["site"] for s in t["stops"]) for t in first] == [["D1", "K1"], ["D2"], ["K2", "K3"]]
    assert [[t["trip"] for t in trips] for trips in by_date.values()] == [
        list(range(1, len(trips) + 1)) for trips in by_date.values()
    ]


def test_a_truck_without_compartments_lists_as_before_without_compartments(client, auth, network):
    etag = client.get("/api/v1/trucks/T1", headers=auth("viewer")).headers["ETag"]
    changed = client.patch(
        "/api/v1/trucks/T1", json={"compartments": None}, headers=auth("admin", **{"If-Match": etag})
    )
    assert changed.status_code == 200, changed.get_json()
    _activate(client, auth)
    trips = client.get("/api/v1/trucks/T1/trips?week=2026-W50", headers=auth("viewer")).get_json()["trips"]
    assert trips and all("compartments" not in s for t in trips for s in t["stops"])
    # Capacity and max_stops alone: the date's 33 000 L go on two trips (worked above).
    first = [sorted(s["site"] for s in t["stops"]) for t in trips if t["date"] == START.isoformat()]
    assert first == [["D1", "D2", "K1"], ["K2", "K3"]]


def test_changing_the_compartments_changes_the_cached_trips(client, auth, network):
    # The trips cache and ETag follow the change stamp, which every UPDATE of trucks bumps
    # (migration 0002's triggers), so a compartments change shows at once.
    _activate(client, auth)
    url = "/api/v1/trucks/T1/trips?week=2026-W50"
    before = client.get(url, headers=auth("viewer"))
    etag = client.get("/api/v1/trucks/T1", headers=auth("viewer")).headers["ETag"]
    changed = client.patch(
        "/api/v1/trucks/T1", json={"compartments": [9000.0, 9000.0]}, headers=auth("admin", **{"If-Match": etag})
    )
    assert changed.status_code == 200, changed.get_json()
    after = client.get(url, headers=auth("viewer", **{"If-None-Match": before.headers["ETag"]}))
    assert after.status_code == 200 and after.headers["ETag"] != before.headers["ETag"]
    # By hand, compartments 9000 | 9000: {K1 9000, D1 3600, D2 3000} loads whole (heating oil in one,
    # diesel 6600 in the other) and {K2 9000, K3 8400} takes both for 17 400 L of heating oil: two trips.
    first = [t for t in after.get_json()["trips"] if t["date"] == START.isoformat()]
    assert [sorted(s["site"] for s in t["stops"]) for t in first] == [["D1", "D2", "K1"], ["K2", "K3"]]
    assert [s["compartments"] for s in first[0]["stops"] if s["site"] == "K1"] in ([[[1, 9000.0]]], [[[2, 9000.0]]])
