"""The one-day rule: no write may store an active site whose usable stock lasts less than a day.

Usable stock ``q = min(tank_capacity × safe_fill − safety_stock, truck capacity)`` (docs/planning.md
§1). Before the rule, such a site was stored, and then every plan of its truck failed with 422.
"""

from __future__ import annotations

import threading

import pytest
from contract import UNCONSTRAINED_CALENDAR
from hypothesis import given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select, update

from service.api.usable_stock import lasts_a_day
from service.persistence.models import Plan, Site, Truck
from service.planning import PlanningInputError, SiteInput, TruckInput
from service.planning.inputs import validate
from tests.api.fleet_bodies import site

SITES = "/api/v1/sites"
TRUCKS = "/api/v1/trucks"
IMPORT = "/api/v1/sites/import"
HEADER = "code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity,safe_fill,safety_stock,active"


def truck(code: str, capacity: float) -> dict:
    # Every day, many trips: these tests are about the one-day rule, not the calendar (a tank of one
    # day cannot last a weekend).
    return {"code": code, "name": f"Truck {code}", "dispatch_cost": 150.0, "capacity": capacity, **UNCONSTRAINED_CALENDAR}


@pytest.fixture
def trucks(client, auth):
    """T1 carries 18 000 L a trip, SMALL only 3 000 L."""
    for body in (truck("T1", 18000.0), truck("SMALL", 3000.0)):
        assert client.post(TRUCKS, json=body, headers=auth("admin")).status_code == 201


def create(client, auth, body):
    response = client.post(SITES, json=body, headers=auth("admin"))
    assert response.status_code == 201, response.get_json()
    return response


def count(db_session, model=Site) -> int:
    return db_session.scalar(select(func.count()).select_from(model))


def assert_refused(response, pointer: str, *phrases: str) -> dict:
    assert response.status_code == 422, response.get_json()
    assert response.mimetype == "application/problem+json"
    body = response.get_json()
    assert [e["pointer"] for e in body["errors"]] == [pointer]
    for phrase in phrases:
        assert phrase in body["detail"], (phrase, body["detail"])
    return body


def test_post_refuses_a_tank_that_holds_less_than_a_day(client, auth, trucks, db_session):
    # 4 300 × 0.9 − 0 = 3 870 L usable, 4 000 L a day.
    body = site("S1", demand_per_day=4000.0, tank_capacity=4300.0, safe_fill=0.9)
    response = client.post(SITES, json=body, headers=auth("admin"))
    assert_refused(response, "#/tank_capacity", "S1", "3 870 L", "4 000 L", "one day", "T1")
    assert count(db_session) == 0


def test_post_refuses_a_truck_too_small_for_a_days_demand(client, auth, trucks, db_session):
    body = site("S1", truck_code="SMALL", demand_per_day=4000.0)  # the tank holds 9 000 L, the truck 3 000 L
    response = client.post(SITES, json=body, headers=auth("admin"))
    assert_refused(response, "#/truck", "3 000 L", "4 000 L", "truck SMALL")
    assert count(db_session) == 0


def test_the_refused_site_would_have_broken_every_plan_of_its_truck(client, auth, trucks):
    create(client, auth, site("A"))
    body = site("B", demand_per_day=4000.0, tank_capacity=4300.0)
    assert client.post(SITES, json=body, headers=auth("admin")).status_code == 422
    plan = client.post("/api/v1/trucks/T1/plans", json={}, headers=auth("dispatcher"))
    assert plan.status_code == 201, plan.get_json()  # the truck's other sites still plan


def test_an_inactive_site_is_checked_when_it_is_switched_on(client, auth, trucks, db_session):
    etag = create(client, auth, site("S1", demand_per_day=4000.0, tank_capacity=4300.0, active=False)).headers["ETag"]
    response = client.patch(f"{SITES}/S1", json={"active": True}, headers=auth("admin", **{"If-Match": etag}))
    assert_refused(response, "#/active", "3 870 L", "4 000 L")
    assert db_session.scalars(select(Site.active)).one() is False


@pytest.mark.parametrize(
    ("change", "pointer"),
    [
        ({"demand_per_day": 9500.0}, "#/demand_per_day"),  # 9 000 L usable
        ({"tank_capacity": 300.0}, "#/tank_capacity"),  # 270 L usable
        ({"safe_fill": 0.02}, "#/safe_fill"),
        ({"safety_stock": 8800.0}, "#/safety_stock"),
        ({"truck": "SMALL", "demand_per_day": 3500.0}, "#/truck"),
        ({"truck": "SMALL", "name": "renamed"}, None),  # 300 L a day fits in 3 000 L: allowed
    ],
)
def test_patch_refuses_a_change_that_leaves_less_than_a_day(client, auth, trucks, db_session, change, pointer):
    etag = create(client, auth, site("S1")).headers["ETag"]
    response = client.patch(f"{SITES}/S1", json=change, headers=auth("admin", **{"If-Match": etag}))
    if pointer is None:
        assert response.status_code == 200, response.get_json()
        return
    body = assert_refused(response, pointer, "Site S1", "less than one day's demand")
    assert "every plan of truck" in body["errors"][0]["detail"]
    assert db_session.scalars(select(Site.version)).one() == 1


def test_a_change_that_does_not_touch_the_rule_is_not_checked(client, auth, trucks, db_session):
    """A site stored before the rule (written behind the API) can still be renamed or switched off."""
    etag = create(client, auth, site("S1")).headers["ETag"]
    db_session.execute(Site.__table__.update().values(demand_per_day=20000.0))
    db_session.commit()
    renamed = client.patch(f"{SITES}/S1", json={"name": "old"}, headers=auth("admin", **{"If-Match": etag}))
    assert renamed.status_code == 200, renamed.get_json()
    off = client.patch(
        f"{SITES}/S1", json={"active": False}, headers=auth("admin", **{"If-Match": renamed.headers["ETag"]})
    )
    assert off.status_code == 200, off.get_json()


def test_truck_patch_refuses_a_capacity_below_a_days_demand_of_its_active_sites(client, auth, trucks, db_session):
    create(client, auth, site("BIG", demand_per_day=5000.0))
    create(client, auth, site("MID", demand_per_day=4500.0))
    create(client, auth, site("OFF", demand_per_day=6000.0, active=False))  # inactive: not planned
    create(client, auth, site("LOW", demand_per_day=100.0))
    etag = client.get(f"{TRUCKS}/T1", headers=auth("viewer")).headers["ETag"]
    response = client.patch(f"{TRUCKS}/T1", json={"capacity": 4000.0}, headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 422, response.get_json()
    body = response.get_json()
    assert "sites BIG, MID" in body["detail"] and "5 000 L" in body["detail"] and "4 000 L" in body["detail"]
    assert [(e["pointer"], e["detail"].split(":")[0]) for e in body["errors"]] == [
        ("#/capacity", "Site BIG"),
        ("#/capacity", "Site MID"),
    ]
    assert db_session.scalars(select(Truck.capacity).where(Truck.code == "T1")).one() == 18000.0
    # The smallest capacity the message names is accepted, and so is a plan afterwards.
    enough = client.patch(f"{TRUCKS}/T1", json={"capacity": 5000.0}, headers=auth("admin", **{"If-Match": etag}))
    assert enough.status_code == 200, enough.get_json()
    assert client.post("/api/v1/trucks/T1/plans", json={}, headers=auth("dispatcher")).status_code == 201


@pytest.mark.parametrize("write", ["create", "change"])
def test_a_site_write_waits_for_a_truck_change_in_flight_and_sees_it(client, auth, trucks, db_session, write):
    """A truck capacity cut that has checked its sites but not yet committed: a site write that
    would break the new capacity waits for it (the truck's lock; PostgreSQL ``FOR SHARE`` against
    the change's row lock, SQLite ``BEGIN IMMEDIATE``), then is checked against it."""
    etag = create(client, auth, site("S1")).headers["ETag"] if write == "change" else None
    db_session.execute(update(Truck).where(Truck.code == "T1").values(capacity=3000.0, version=Truck.version + 1))
    answers = []

    def site_write() -> None:
        if write == "create":
            answers.append(client.post(SITES, json=site("S2", demand_per_day=4000.0), headers=auth("admin")))
        else:
            headers = auth("admin", **{"If-Match": etag})
            answers.append(client.patch(f"{SITES}/S1", json={"demand_per_day": 4000.0}, headers=headers))

    writer = threading.Thread(target=site_write)
    writer.start()
    writer.join(0.5)
    assert writer.is_alive()  # waiting for the truck
    db_session.commit()
    writer.join(30)
    assert answers and answers[0].status_code == 422, answers[0].get_json() if answers else None
    assert "3 000 L" in answers[0].get_json()["detail"]


def test_csv_rows_that_hold_less_than_a_day_are_named_and_nothing_is_written(client, auth, trucks, db_session):
    lines = [
        HEADER,
        "A,fine,T1,300,0.001,30,10000,0.9,0,true",
        "B,small tank,T1,4000,0.001,30,4300,0.9,0,true",  # 3 870 L usable
        "C,small truck,SMALL,4000,0.001,30,10000,0.9,0,true",  # 3 000 L usable
        "D,switched off,T1,4000,0.001,30,4300,0.9,0,false",  # not planned: allowed
    ]
    body = ("\n".join(lines) + "\n").encode()
    for query in ("?dry_run=true", ""):
        response = client.post(IMPORT + query, data=body, headers=auth("admin"), content_type="text/csv")
        assert response.status_code == 422, response.get_json()
        errors = response.get_json()["errors"]
        assert [e["pointer"] for e in errors] == ["#/rows/3/tank_capacity", "#/rows/4/truck"]
        assert "Row 3" in errors[0]["detail"] and "3 870 L" in errors[0]["detail"] and "4 000 L" in errors[0]["detail"]
        assert "3 000 L" in errors[1]["detail"] and "truck SMALL" in errors[1]["detail"]
    assert count(db_session) == 0 and count(db_session, Plan) == 0


def test_a_tank_that_holds_exactly_a_day_is_not_refused_by_rounding(client, auth, trucks, db_session):
    # 0.94 × 4 300 = 4 042 exactly, but 4 041.999…95 in binary floating point (IEEE 754 double).
    assert 4300 * 0.94 < 4042
    create(client, auth, site("S1", demand_per_day=4042.0, tank_capacity=4300.0, safe_fill=0.94))
    row = "S2,csv,T1,4042,0.001,30,4300,0.94,0,true"
    response = client.post(IMPORT, data=f"{HEADER}\n{row}\n", headers=auth("admin"), content_type="text/csv")
    assert response.status_code == 200, response.get_json()
    etag = client.get(f"{TRUCKS}/T1", headers=auth("viewer")).headers["ETag"]
    capacity = {"capacity": 4042.0 * (1 - 0.5e-9)}  # within the relative tolerance of one day
    assert client.patch(f"{TRUCKS}/T1", json=capacity, headers=auth("admin", **{"If-Match": etag})).status_code == 200
    etag = client.get(f"{TRUCKS}/T1", headers=auth("viewer")).headers["ETag"]
    capacity = {"capacity": 4042.0 * (1 - 2e-9)}  # beyond it: less than a day
    assert client.patch(f"{TRUCKS}/T1", json=capacity, headers=auth("admin", **{"If-Match": etag})).status_code == 422


def _core_accepts(tank: float, fill: float, safety: float, demand: float, capacity: float) -> bool:
    """Whether the planning core takes this site (it raises for a usable stock under one day)."""
    try:
        validate([SiteInput("S", demand, 0.001, 30.0, tank, fill, safety)], TruckInput(150.0, capacity=capacity))
    except PlanningInputError:
        return False
    return True


#: The planning core on main still compares ``q / d >= 1`` exactly; its fix (a relative tolerance,
#: the API's expression) is another change. Until that is merged the two disagree within a hair of
#: one day, and the tests below are expected to fail (strict: once the core is fixed, it must pass).
CORE_ROUNDS_BOUNDARY = not _core_accepts(4300.0, 0.94, 0.0, 4042.0, 1e9)
WITH_CORE_FIX = pytest.mark.xfail(CORE_ROUNDS_BOUNDARY, reason="planning core without the tolerance fix", strict=True)


@WITH_CORE_FIX
def test_a_tank_of_exactly_one_day_is_plannable_as_the_api_says():
    assert lasts_a_day(4300.0 * 0.94, 4042.0)
    assert _core_accepts(4300.0, 0.94, 0.0, 4042.0, 1e9)


@WITH_CORE_FIX
@settings(max_examples=300, deadline=None)
@given(
    tank=st.floats(1.0, 1e6),
    fill=st.floats(0.01, 1.0),
    safety_share=st.floats(0.0, 0.999),
    capacity=st.floats(1.0, 1e7),
    demand_per_usable=st.one_of(st.floats(0.5, 2.0), st.floats(1 - 1e-8, 1 + 1e-8)),
)
def test_the_api_rule_agrees_with_the_planning_core(tank, fill, safety_share, capacity, demand_per_usable):
    """Accepted by the API ⇔ planned by the core, also within a hair of one day (rounding)."""
    safety = safety_share * tank * fill
    usable = min(tank * fill - safety, capacity)
    demand = usable * demand_per_usable
    assert lasts_a_day(usable, demand) == _core_accepts(tank, fill, safety, demand, capacity)
