"""A small network through the API: truck ``T1`` and its sites ``A0``, ``A1``, … (the readings,
deliveries, consumption, trips, idempotency and plan concurrency tests start from it)."""

from __future__ import annotations

from collections.abc import Sequence


def post_network(client, auth, demands: Sequence[float]) -> None:
    """Truck ``T1`` (capacity 18 000, at most 6 stops) and its sites (:func:`post_sites`)."""
    truck = {"code": "T1", "name": "Truck", "dispatch_cost": 150.0, "capacity": 18000.0, "max_stops": 6}
    assert client.post("/api/v1/trucks", json=truck, headers=auth("admin")).status_code == 201
    post_sites(client, auth, demands)


def post_sites(client, auth, demands: Sequence[float]) -> None:
    """One site ``A<i>`` on truck ``T1`` per demand, each with a 10 000 tank and a safety stock of 500."""
    for i, demand in enumerate(demands):
        site = {
            "code": f"A{i}",
            "name": f"Site {i}",
            "truck": "T1",
            "demand_per_day": demand,
            "holding_cost": 0.002,
            "stop_cost": 30.0,
            "tank_capacity": 10000.0,
            "safety_stock": 500.0,
        }
        assert client.post("/api/v1/sites", json=site, headers=auth("admin")).status_code == 201
