"""Sites: list with ?truck=, keyset pages, read, create, PATCH with If-Match, delete, safety stock."""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import func, select

from service.persistence.models import Plan, PlanSite, Site, Truck
from tests.api.fleet_bodies import site, truck

BASE = "/api/v1/sites"


@pytest.fixture
def trucks(client, auth):
    for code in ("T1", "T2"):
        assert client.post("/api/v1/trucks", json=truck(code), headers=auth("admin")).status_code == 201


def create(client, auth, body):
    response = client.post(BASE, json=body, headers=auth("admin"))
    assert response.status_code == 201, response.get_json()
    return response


def count(db_session, model=Site) -> int:
    return db_session.scalar(select(func.count()).select_from(model))


def record_plan(db_session, site_code: str) -> None:
    """A recorded plan referencing the site (as the plans module writes them)."""
    row = db_session.scalars(select(Site).where(Site.code == site_code)).one()
    plan = Plan(
        truck_id=row.truck_id,
        status="proposed",
        method="test",
        start_date=dt.date(2026, 12, 7),
        created_by="test",
        inputs={},
        inputs_digest="0" * 64,
        result={},
    )
    db_session.add(plan)
    db_session.flush()
    db_session.add(PlanSite(plan_id=plan.id, site_id=row.id))
    db_session.commit()


def test_create_defaults_location_etag(client, auth, trucks, db_session):
    response = create(client, auth, site("S-1"))
    assert response.headers["Location"].endswith("/api/v1/sites/S-1")
    assert response.headers["ETag"]
    body = response.get_json()
    assert body["truck"] == "T1" and body["version"] == 1
    assert body["safe_fill"] == 0.9 and body["safety_stock"] == 0.0 and body["active"] is True
    assert body["latitude"] is None and body["longitude"] is None
    assert {"created_at", "updated_at"} <= body.keys()
    assert count(db_session) == 1


def test_create_with_unknown_truck_is_422_naming_truck(client, auth, trucks, db_session):
    response = client.post(BASE, json=site("S-1", truck_code="NOPE"), headers=auth("admin"))
    assert response.status_code == 422
    assert response.get_json()["errors"][0]["pointer"] == "#/truck"
    assert count(db_session) == 0


def test_duplicate_code_is_409(client, auth, trucks, db_session):
    create(client, auth, site("S-1"))
    response = client.post(BASE, json=site("S-1", name="other"), headers=auth("admin"))
    assert response.status_code == 409
    assert response.mimetype == "application/problem+json"
    assert count(db_session) == 1


def test_list_filters_by_truck_and_pages_with_link(client, auth, trucks):
    for i in range(5):
        create(client, auth, site(f"A{i}", "T1"))
    for i in range(3):
        create(client, auth, site(f"B{i}", "T2"))
    everything = client.get(BASE, headers=auth("viewer"))
    assert [s["code"] for s in everything.get_json()["items"]] == [f"A{i}" for i in range(5)] + ["B0", "B1", "B2"]
    assert "Link" not in everything.headers

    first = client.get(f"{BASE}?truck=T1&limit=2", headers=auth("viewer"))
    assert [s["code"] for s in first.get_json()["items"]] == ["A0", "A1"]
    link = first.headers["Link"]
    assert link.endswith('rel="next"')
    next_url = link[1 : link.index(">")]
    assert "truck=T1" in next_url and "after=A1" in next_url
    second = client.get(next_url, headers=auth("viewer"))
    assert [s["code"] for s in second.get_json()["items"]] == ["A2", "A3"]
    third = client.get(second.headers["Link"][1 : second.headers["Link"].index(">")], headers=auth("viewer"))
    assert [s["code"] for s in third.get_json()["items"]] == ["A4"]
    assert "Link" not in third.headers

    only_t2 = client.get(f"{BASE}?truck=T2", headers=auth("viewer")).get_json()["items"]
    assert {s["truck"] for s in only_t2} == {"T2"} and len(only_t2) == 3
    assert client.get(f"{BASE}?truck=NONE", headers=auth("viewer")).get_json() == {"items": []}


def test_get_and_if_none_match(client, auth, trucks):
    etag = create(client, auth, site("S-1")).headers["ETag"]
    response = client.get(f"{BASE}/S-1", headers=auth("viewer"))
    assert response.status_code == 200 and response.headers["ETag"] == etag
    assert response.get_json()["code"] == "S-1"
    assert client.get(f"{BASE}/S-1", headers=auth("viewer", **{"If-None-Match": etag})).status_code == 304
    assert client.get(f"{BASE}/S-2", headers=auth("viewer")).status_code == 404


def test_patch_bumps_version_new_etag_and_can_move_truck(client, auth, trucks, db_session):
    etag = create(client, auth, site("S-1")).headers["ETag"]
    response = client.patch(
        f"{BASE}/S-1", json={"demand_per_day": 350.5, "truck": "T2"}, headers=auth("admin", **{"If-Match": etag})
    )
    assert response.status_code == 200, response.get_json()
    body = response.get_json()
    assert body["version"] == 2 and body["demand_per_day"] == 350.5 and body["truck"] == "T2"
    assert response.headers["ETag"] not in (None, etag)
    stored = db_session.scalars(select(Site).where(Site.code == "S-1")).one()
    t2 = db_session.scalars(select(Truck).where(Truck.code == "T2")).one()
    assert stored.version == 2 and stored.truck_id == t2.id and stored.demand_per_day == 350.5


def test_patch_precondition_412_and_428(client, auth, trucks, db_session):
    etag = create(client, auth, site("S-1")).headers["ETag"]
    assert client.patch(f"{BASE}/S-1", json={"name": "x"}, headers=auth("admin")).status_code == 428
    stale = client.patch(f"{BASE}/S-1", json={"name": "x"}, headers=auth("admin", **{"If-Match": '"0000"'}))
    assert stale.status_code == 412
    assert stale.get_json()["status"] == 412
    assert db_session.scalars(select(Site.version).where(Site.code == "S-1")).one() == 1
    assert (
        client.patch(f"{BASE}/S-1", json={"name": "x"}, headers=auth("admin", **{"If-Match": etag})).status_code == 200
    )
    assert (
        client.patch(f"{BASE}/S-1", json={"name": "y"}, headers=auth("admin", **{"If-Match": etag})).status_code == 412
    )


def test_patch_unknown_truck_is_422_and_changes_nothing(client, auth, trucks, db_session):
    etag = create(client, auth, site("S-1")).headers["ETag"]
    response = client.patch(
        f"{BASE}/S-1", json={"truck": "NOPE", "name": "x"}, headers=auth("admin", **{"If-Match": etag})
    )
    assert response.status_code == 422
    assert response.get_json()["errors"][0]["pointer"] == "#/truck"
    assert db_session.scalars(select(Site.name).where(Site.code == "S-1")).one() == "Site S-1"


def test_safety_stock_must_stay_below_safe_fill_times_capacity_on_post(client, auth, trucks, db_session):
    for body in (
        site("S-1", safety_stock=9000.0),  # 0.9 × 10000 = 9000: equal is refused
        site("S-2", safety_stock=5000.0, safe_fill=0.5),
        site("S-3", safety_stock=20000.0),
    ):
        response = client.post(BASE, json=body, headers=auth("admin"))
        assert response.status_code == 422, body
        assert [e["pointer"] for e in response.get_json()["errors"]] == ["#/safety_stock"]
    assert count(db_session) == 0
    just_below = site("S-4", safety_stock=8999.0, demand_per_day=1.0)  # 1 L left: one day at 1 L a day
    assert create(client, auth, just_below).get_json()["safety_stock"] == 8999.0


@pytest.mark.parametrize(
    "change",
    [
        {"safety_stock": 9000.0},
        {"safe_fill": 0.2},
        {"tank_capacity": 2000.0},
        {"safe_fill": 0.5, "safety_stock": 6000.0},
    ],
)
def test_safety_stock_checked_on_patch_against_stored_values(client, auth, trucks, db_session, change):
    etag = create(client, auth, site("S-1", safety_stock=2500.0)).headers["ETag"]
    response = client.patch(f"{BASE}/S-1", json=change, headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 422, response.get_json()
    assert response.mimetype == "application/problem+json"
    assert any(e["pointer"] == "#/safety_stock" for e in response.get_json()["errors"])
    stored = db_session.scalars(select(Site).where(Site.code == "S-1")).one()
    assert (stored.version, stored.safety_stock, stored.safe_fill, stored.tank_capacity) == (1, 2500.0, 0.9, 10000.0)


def test_patch_that_keeps_safety_stock_valid_is_accepted(client, auth, trucks):
    etag = create(client, auth, site("S-1", safety_stock=2500.0)).headers["ETag"]
    response = client.patch(f"{BASE}/S-1", json={"safe_fill": 0.3}, headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 200  # 0.3 × 10000 = 3000 > 2500
    assert response.get_json()["safe_fill"] == 0.3


def test_delete_unplanned_site_is_hard_delete_with_if_match(client, auth, trucks, db_session):
    etag = create(client, auth, site("S-1")).headers["ETag"]
    assert client.delete(f"{BASE}/S-1", headers=auth("admin")).status_code == 428
    assert client.delete(f"{BASE}/S-1", headers=auth("admin", **{"If-Match": '"x"'})).status_code == 412
    assert client.delete(f"{BASE}/S-1", headers=auth("admin", **{"If-Match": etag})).status_code == 204
    assert count(db_session) == 0
    assert client.get(f"{BASE}/S-1", headers=auth("viewer")).status_code == 404


def test_delete_planned_site_is_409_and_patch_active_false_works(client, auth, trucks, db_session):
    etag = create(client, auth, site("S-1")).headers["ETag"]
    record_plan(db_session, "S-1")
    response = client.delete(f"{BASE}/S-1", headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 409
    assert "active=false" in response.get_json()["detail"]
    assert count(db_session) == 1
    retired = client.patch(f"{BASE}/S-1", json={"active": False}, headers=auth("admin", **{"If-Match": etag}))
    assert retired.status_code == 200 and retired.get_json()["active"] is False


def test_truck_with_a_recorded_plan_cannot_be_deleted(client, auth, trucks, db_session):
    create(client, auth, site("S-1"))
    record_plan(db_session, "S-1")
    db_session.execute(PlanSite.__table__.delete())
    db_session.execute(Site.__table__.delete())
    db_session.commit()
    etag = client.get("/api/v1/trucks/T1", headers=auth("viewer")).headers["ETag"]
    response = client.delete("/api/v1/trucks/T1", headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 409
    assert count(db_session, Truck) == 2
    etag2 = client.get("/api/v1/trucks/T2", headers=auth("viewer")).headers["ETag"]
    assert client.delete("/api/v1/trucks/T2", headers=auth("admin", **{"If-Match": etag2})).status_code == 204


@pytest.mark.parametrize("code", ["import", "export"])
def test_route_names_are_not_site_codes(client, auth, demo, code):
    # /api/v1/sites/import and /export are fixed routes (issue 2); a site with such a code could
    # never be read at /api/v1/sites/{code}.
    body = {
        "code": code,
        "name": "x",
        "truck": "HV-R1",
        "demand_per_day": 10,
        "holding_cost": 0.001,
        "stop_cost": 5,
        "tank_capacity": 1000,
    }
    response = client.post("/api/v1/sites", json=body, headers=auth("admin"))
    assert response.status_code == 422
    assert response.get_json()["errors"][0]["pointer"] == "#/code"


@pytest.mark.parametrize("code", [".", "..", "...", "." * 40])
def test_codes_made_only_of_dots_are_refused(client, auth, trucks, db_session, code):
    """``/sites/.`` and ``/sites/..`` are dot segments, which clients remove from a path (RFC 3986
    §5.2.4): a site or truck with such a code could never be read, changed or deleted."""
    response = client.post(BASE, json=site(code), headers=auth("admin"))
    assert response.status_code == 422, response.get_json()
    assert [e["pointer"] for e in response.get_json()["errors"]] == ["#/code"]
    assert "only dots" in response.get_json()["errors"][0]["detail"]
    csv_body = f"code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity\n{code},x,T1,1,0,0,10\n"
    imported = client.post(f"{BASE}/import", data=csv_body, headers=auth("admin"), content_type="text/csv")
    assert imported.status_code == 422, imported.get_json()
    assert [e["pointer"] for e in imported.get_json()["errors"]] == ["#/rows/2/code"]
    created = client.post("/api/v1/trucks", json=truck(code), headers=auth("admin"))
    assert created.status_code == 422 and created.get_json()["errors"][0]["pointer"] == "#/code"
    assert count(db_session) == 0 and count(db_session, Truck) == 2
    # Dots among other characters stay valid codes, and reachable.
    create(client, auth, site(f"{code[:39]}a"))
    assert client.get(f"{BASE}/{code[:39]}a", headers=auth("viewer")).status_code == 200
