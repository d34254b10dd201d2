"""The truck's working calendar through the API (issue 13): stored fields, defaults, validation.

The holiday regions are checked against the installed ``holidays`` package (its own list of
supported countries and subdivisions), never the network.
"""

from __future__ import annotations

import datetime as dt

import holidays
import pytest
from sqlalchemy import select

from service.persistence.models import Truck

BASE = "/api/v1/trucks"
JOINT = "/api/v1/calculations/joint"


def truck(code: str = "T1", **extra):
    return {"code": code, "name": f"Truck {code}", "dispatch_cost": 150.0, "capacity": 18000.0} | extra


def joint(**extra):
    site = {"code": "S1", "demand_per_day": 300.0, "holding_cost": 0.002, "stop_cost": 30.0, "tank_capacity": 10000.0}
    return {"dispatch_cost": 150.0, "truck_capacity": 18000.0, "sites": [site]} | extra


def pointers(response) -> list[str]:
    return [e["pointer"] for e in response.get_json().get("errors", [])]


def test_defaults_are_monday_to_friday_one_trip_no_closures(client, auth, db_session):
    response = client.post(BASE, json=truck(), headers=auth("admin"))
    assert response.status_code == 201, response.get_json()
    body = response.get_json()
    assert body["working_days"] == [1, 2, 3, 4, 5]
    assert body["trips_per_day"] == 1
    assert body["closed_dates"] == []
    assert body["holiday_region"] is None
    stored = db_session.scalars(select(Truck).where(Truck.code == "T1")).one()
    assert (stored.working_days, stored.trips_per_day, stored.closed_dates, stored.holiday_region) == (
        [1, 2, 3, 4, 5],
        1,
        [],
        None,
    )


def test_a_calendar_is_stored_normalised_and_read_back(client, auth, db_session):
    body = truck(
        working_days=[6, 1, 3],
        trips_per_day=3,
        closed_dates=["2027-08-02", "2027-01-04"],
        holiday_region="GB-SCT",
    )
    response = client.post(BASE, json=body, headers=auth("admin"))
    assert response.status_code == 201, response.get_json()
    got = client.get(f"{BASE}/T1", headers=auth("viewer")).get_json()
    assert got["working_days"] == [1, 3, 6]
    assert got["trips_per_day"] == 3
    assert got["closed_dates"] == ["2027-01-04", "2027-08-02"]
    assert got["holiday_region"] == "GB-SCT"
    stored = db_session.scalars(select(Truck).where(Truck.code == "T1")).one()
    assert stored.closed_dates == ["2027-01-04", "2027-08-02"]


def test_patch_changes_the_calendar_and_the_version(client, auth):
    created = client.post(BASE, json=truck(), headers=auth("admin"))
    etag = created.headers["ETag"]
    response = client.patch(
        f"{BASE}/T1",
        json={"working_days": [1, 2, 3, 4, 5, 6], "trips_per_day": 2, "holiday_region": "US-NY"},
        headers=auth("admin", **{"If-Match": etag}),
    )
    assert response.status_code == 200, response.get_json()
    body = response.get_json()
    assert body["working_days"] == [1, 2, 3, 4, 5, 6] and body["trips_per_day"] == 2
    assert body["holiday_region"] == "US-NY" and body["closed_dates"] == []
    assert body["version"] == 2 and response.headers["ETag"] != etag
    # A PATCH without calendar fields leaves the calendar alone.
    response = client.patch(
        f"{BASE}/T1", json={"name": "Renamed"}, headers=auth("admin", **{"If-Match": response.headers["ETag"]})
    )
    assert response.get_json()["trips_per_day"] == 2 and response.get_json()["holiday_region"] == "US-NY"
    # null removes the region.
    response = client.patch(
        f"{BASE}/T1", json={"holiday_region": None}, headers=auth("admin", **{"If-Match": response.headers["ETag"]})
    )
    assert response.status_code == 200 and response.get_json()["holiday_region"] is None


BAD_CALENDARS = [
    ({"working_days": [0, 1]}, "#/working_days/0"),
    ({"working_days": [1, 8]}, "#/working_days/1"),
    ({"working_days": []}, "#/working_days"),
    ({"working_days": [1, 2, 2]}, "#/working_days"),
    ({"working_days": ["1"]}, "#/working_days/0"),
    ({"working_days": 1}, "#/working_days"),
    ({"trips_per_day": 0}, "#/trips_per_day"),
    ({"trips_per_day": 25}, "#/trips_per_day"),
    ({"trips_per_day": 1.5}, "#/trips_per_day"),
    ({"trips_per_day": None}, "#/trips_per_day"),
    ({"closed_dates": ["2026-02-30"]}, "#/closed_dates/0"),
    ({"closed_dates": ["25/12/2026"]}, "#/closed_dates/0"),
    ({"closed_dates": ["2026-12-25", "2026-12-25"]}, "#/closed_dates"),
    ({"closed_dates": ["1969-12-31"]}, "#/closed_dates/0"),
    (
        {"closed_dates": [(dt.date(2027, 1, 1) + dt.timedelta(days=i)).isoformat() for i in range(1001)]},
        "#/closed_dates",
    ),
    ({"holiday_region": "XX"}, "#/holiday_region"),
    ({"holiday_region": "GB-XYZ"}, "#/holiday_region"),
    ({"holiday_region": "GB-"}, "#/holiday_region"),
    ({"holiday_region": "gb"}, "#/holiday_region"),
    ({"holiday_region": ""}, "#/holiday_region"),
]


@pytest.mark.parametrize(("extra", "pointer"), BAD_CALENDARS)
def test_a_bad_calendar_is_422_naming_the_field_on_trucks_and_calculations(client, auth, db_session, extra, pointer):
    response = client.post(BASE, json=truck(**extra), headers=auth("admin"))
    assert response.status_code == 422, response.get_json()
    assert response.mimetype == "application/problem+json"
    assert pointer in pointers(response), pointers(response)
    assert db_session.scalar(select(Truck.id)) is None
    # The joint calculation takes the same fields with the same rules.
    response = client.post(JOINT, json=joint(**extra), headers=auth("dispatcher"))
    assert response.status_code == 422, response.get_json()
    assert pointer in pointers(response), pointers(response)


def test_bad_calendar_in_a_patch_is_422_and_changes_nothing(client, auth):
    created = client.post(BASE, json=truck(), headers=auth("admin"))
    response = client.patch(
        f"{BASE}/T1", json={"trips_per_day": 25}, headers=auth("admin", **{"If-Match": created.headers["ETag"]})
    )
    assert response.status_code == 422 and "#/trips_per_day" in pointers(response)
    assert client.get(f"{BASE}/T1", headers=auth("viewer")).get_json()["trips_per_day"] == 1


def test_1000_closed_dates_are_accepted(client, auth):
    dates = [(dt.date(2027, 1, 1) + dt.timedelta(days=i)).isoformat() for i in range(1000)]
    response = client.post(BASE, json=truck(closed_dates=dates), headers=auth("admin"))
    assert response.status_code == 201, response.get_json()
    assert len(response.get_json()["closed_dates"]) == 1000


@pytest.mark.parametrize("region", ["GB", "GB-SCT", "US-NY", "DE-BY", "FR"])
def test_regions_of_the_holidays_package_are_accepted(client, auth, region):
    # The region must be one the installed package itself lists (its supported countries and subdivisions).
    country, _, subdivision = region.partition("-")
    supported = holidays.list_supported_countries()
    assert country in supported and (not subdivision or subdivision in supported[country])
    response = client.post(BASE, json=truck(holiday_region=region), headers=auth("admin"))
    assert response.status_code == 201, response.get_json()
    assert response.get_json()["holiday_region"] == region
