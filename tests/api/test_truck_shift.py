"""Trucks' optional shift fields (issue 16): shift_hours (0, 24], average_speed_kmh > 0, stop_minutes >= 0,
load_minutes >= 0; shift_hours needs average_speed_kmh (docs/fleet.md §6a)."""

from __future__ import annotations

import pytest
from sqlalchemy import func, select

from service.persistence.models import Truck

TRUCKS = "/api/v1/trucks"
TRUCK = {"code": "T1", "name": "Truck one", "dispatch_cost": 150.0, "capacity": 18000.0}
SHIFT = {"shift_hours": 9.5, "average_speed_kmh": 55.0, "stop_minutes": 25.0, "load_minutes": 40.0}


def problem(response, status, pointer):
    assert response.status_code == status, response.get_json()
    assert response.mimetype == "application/problem+json"
    assert pointer in [e["pointer"] for e in response.get_json()["errors"]], response.get_json()


def test_shift_fields_default_to_null_and_round_trip(client, auth, db_session):
    plain = client.post(TRUCKS, json=TRUCK, headers=auth("admin")).get_json()
    assert {k: plain[k] for k in SHIFT} == dict.fromkeys(SHIFT)
    created = client.post(TRUCKS, json=TRUCK | {"code": "T2"} | SHIFT, headers=auth("admin"))
    assert created.status_code == 201, created.get_json()
    assert {k: created.get_json()[k] for k in SHIFT} == SHIFT
    read = client.get(f"{TRUCKS}/T2", headers=auth("viewer")).get_json()
    assert {k: read[k] for k in SHIFT} == SHIFT
    stored = db_session.scalars(select(Truck).where(Truck.code == "T2")).one()
    assert (stored.shift_hours, stored.average_speed_kmh, stored.stop_minutes, stored.load_minutes) == (
        9.5,
        55.0,
        25.0,
        40.0,
    )
    # A speed alone times the trips without limiting the day.
    alone = client.post(TRUCKS, json=TRUCK | {"code": "T3", "average_speed_kmh": 60.0}, headers=auth("admin"))
    assert alone.status_code == 201 and alone.get_json()["shift_hours"] is None


@pytest.mark.parametrize(
    ("extra", "pointer"),
    [
        ({"shift_hours": 0}, "#/shift_hours"),
        ({"shift_hours": 24.5, "average_speed_kmh": 50}, "#/shift_hours"),
        ({"shift_hours": "8"}, "#/shift_hours"),
        ({"average_speed_kmh": 0}, "#/average_speed_kmh"),
        ({"average_speed_kmh": -10}, "#/average_speed_kmh"),
        ({"stop_minutes": -1}, "#/stop_minutes"),
        ({"load_minutes": -0.5}, "#/load_minutes"),
        ({"shift_hours": 8}, "#/average_speed_kmh"),  # a shift needs a speed
    ],
)
def test_bad_shift_fields_are_422_naming_the_field(client, auth, db_session, extra, pointer):
    problem(client.post(TRUCKS, json=TRUCK | extra, headers=auth("admin")), 422, pointer)
    assert db_session.scalar(select(func.count()).select_from(Truck)) == 0


def test_patch_checks_the_shift_against_the_stored_speed(client, auth, db_session):
    etag = client.post(TRUCKS, json=TRUCK, headers=auth("admin")).headers["ETag"]

    def patch(body):
        return client.patch(f"{TRUCKS}/T1", json=body, headers=auth("admin", **{"If-Match": etag}))

    problem(patch({"shift_hours": 8.0}), 422, "#/average_speed_kmh")
    changed = patch({"shift_hours": 8.0, "average_speed_kmh": 50.0})
    assert changed.status_code == 200 and changed.get_json()["version"] == 2
    etag = changed.headers["ETag"]
    problem(patch({"average_speed_kmh": None}), 422, "#/average_speed_kmh")  # the stored shift needs it
    later = patch({"shift_hours": 10.0, "stop_minutes": 15.0})
    assert later.status_code == 200 and later.get_json()["average_speed_kmh"] == 50.0
    etag = later.headers["ETag"]
    cleared = patch({"shift_hours": None, "average_speed_kmh": None})
    assert cleared.status_code == 200 and cleared.get_json()["shift_hours"] is None
