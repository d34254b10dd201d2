"""Trips with recorded deliveries (issue 15): history is what happened, a reading after a same-day
delivery counts as after it, deliveries at the truck's shift_start, empty_risk apart from run_out_risk."""

from __future__ import annotations

import datetime as dt

import pytest
from contract import UNCONSTRAINED_CALENDAR

DEMAND = 400.0


@pytest.fixture
def planned(client, auth):
    """One truck (every day, shift 06:00 UTC) and one site, a plan started 20 days ago, activated."""
    truck = {"code": "T1", "name": "Truck", "dispatch_cost": 150.0, "capacity": 18000.0, **UNCONSTRAINED_CALENDAR}
    assert client.post("/api/v1/trucks", json=truck, headers=auth("admin")).status_code == 201
    site = {
        "code": "S1",
        "name": "Site",
        "truck": "T1",
        "demand_per_day": DEMAND,
        "holding_cost": 0.002,
        "stop_cost": 30.0,
        "tank_capacity": 10000.0,
        "safety_stock": 800.0,
    }
    assert client.post("/api/v1/sites", json=site, headers=auth("admin")).status_code == 201
    today = dt.datetime.now(dt.UTC).date()
    start = today - dt.timedelta(days=20)
    plan = client.post("/api/v1/trucks/T1/plans", json={"start_date": start.isoformat()}, headers=auth("dispatcher"))
    assert plan.status_code == 201, plan.get_json()
    plan_id = plan.get_json()["id"]
    assert client.post(f"/api/v1/plans/{plan_id}/activate", headers=auth("dispatcher")).status_code == 200
    return start, today


def stops(client, auth, first: dt.date, last: dt.date) -> tuple[list[tuple[dt.date, dict]], list[dict]]:
    body = client.get(f"/api/v1/trucks/T1/trips?from={first}&to={last}", headers=auth("viewer")).get_json()
    return [(dt.date.fromisoformat(t["date"]), s) for t in body["trips"] for s in t["stops"]], body["warnings"]


def at(day: dt.date, hour: int) -> dt.datetime:
    return dt.datetime.combine(day, dt.time(hour), tzinfo=dt.UTC)


def test_recorded_delivery_is_history_and_a_later_reading_counts_after_it(client, auth, planned):
    start, today = planned
    listed, _ = stops(client, auth, start, today + dt.timedelta(days=40))
    past = [d for d, _s in listed if d < today - dt.timedelta(days=1)]
    day = past[-1]  # a planned delivery day before yesterday
    reading = {"level": 1500.0, "measured_at": at(day, 5).isoformat()}
    assert client.post("/api/v1/sites/S1/readings", json=reading, headers=auth("dispatcher")).status_code == 201
    delivery = {"quantity": 6000.0, "delivered_at": at(day, 7).isoformat(), "truck": "T1"}
    assert client.post("/api/v1/sites/S1/deliveries", json=delivery, headers=auth("dispatcher")).status_code == 201
    # The reading after the delivery, the same day: 1500 − 400·(4 h) + 6000 − 400·(3 h) = 7383.33…
    after = 1500.0 - DEMAND * 2 / 24 + 6000.0 - DEMAND * 3 / 24
    reading = {"level": round(after, 2), "measured_at": at(day, 10).isoformat()}
    assert client.post("/api/v1/sites/S1/readings", json=reading, headers=auth("dispatcher")).status_code == 201
    listed, _ = stops(client, auth, day, today + dt.timedelta(days=40))
    (first_day, first), (next_day, following) = listed[0], listed[1]
    assert first_day == day
    assert first["delivered_quantity"] == 6000.0 and first["quantity"] == 6000.0  # what happened
    assert dt.datetime.fromisoformat(first["delivered_at"]) == at(day, 7)
    # The next stop is projected from the 10:00 reading (after the delivery, not before it), to the
    # truck's shift start (06:00 UTC) of its day.
    elapsed = (at(next_day, 6) - at(day, 10)).total_seconds() / 86400
    assert following["delivered_quantity"] is None
    assert following["projected_level_before"] == pytest.approx(max(0.0, round(after, 2) - DEMAND * elapsed))


def test_shift_start_moves_the_delivery_time(client, auth, planned):
    start, today = planned
    listed, _ = stops(client, auth, today, today + dt.timedelta(days=40))
    day = listed[0][0]
    reading_at = dt.datetime.now(dt.UTC).replace(microsecond=0) - dt.timedelta(minutes=5)
    body = {"level": 9000.0, "measured_at": reading_at.isoformat()}
    assert client.post("/api/v1/sites/S1/readings", json=body, headers=auth("dispatcher")).status_code == 201
    for shift, hours in (("06:00", 6), ("13:30", 13.5)):
        etag = client.get("/api/v1/trucks/T1", headers=auth("admin")).headers["ETag"]
        patched = client.patch(
            "/api/v1/trucks/T1", json={"shift_start": shift}, headers=auth("admin", **{"If-Match": etag})
        )
        assert patched.status_code == 200 and patched.get_json()["shift_start"].startswith(shift)
        listed, _ = stops(client, auth, today, today + dt.timedelta(days=40))
        stop = next(s for d, s in listed if d == day)
        when = dt.datetime.combine(day, dt.time(0), tzinfo=dt.UTC) + dt.timedelta(hours=hours)
        if when > reading_at:
            expected = 9000.0 - DEMAND * (when - reading_at).total_seconds() / 86400
            assert stop["projected_level_before"] == pytest.approx(max(0.0, expected))


def test_empty_risk_apart_from_run_out_risk(client, auth, planned):
    start, today = planned
    now = dt.datetime.now(dt.UTC).replace(microsecond=0) - dt.timedelta(minutes=1)
    # 1000 above nothing: below the safety stock (800) in half a day, empty in 2.5 days.
    body = {"level": 1000.0, "measured_at": now.isoformat()}
    assert client.post("/api/v1/sites/S1/readings", json=body, headers=auth("dispatcher")).status_code == 201
    # Make the next stop late: the truck works only on the weekday 4 days ahead.
    weekday = (now + dt.timedelta(days=4)).isoweekday()
    etag = client.get("/api/v1/trucks/T1", headers=auth("admin")).headers["ETag"]
    change = {"working_days": [weekday]}
    assert (
        client.patch("/api/v1/trucks/T1", json=change, headers=auth("admin", **{"If-Match": etag})).status_code == 200
    )
    _listed, warnings = stops(client, auth, today, today + dt.timedelta(days=6))
    kinds = {w["kind"]: w for w in warnings if w["site"] == "S1"}
    assert kinds["run_out_risk"]["date"] == (now + dt.timedelta(days=0.5)).date().isoformat()
    assert kinds["empty_risk"]["date"] == (now + dt.timedelta(days=2.5)).date().isoformat()
    assert "run empty" in kinds["empty_risk"]["message"]
