"""Trucks: list and keyset pages, read, create, PATCH with If-Match, delete semantics."""

from __future__ import annotations

from sqlalchemy import func, select

from service.persistence.models import Truck
from tests.api.fleet_bodies import site, truck

BASE = "/api/v1/trucks"


def create(client, auth, body, path=BASE):
    response = client.post(path, json=body, headers=auth("admin"))
    assert response.status_code == 201, response.get_json()
    return response


def test_create_returns_201_location_etag_and_body(client, auth, db_session):
    response = create(client, auth, truck("R-1"))
    assert response.headers["Location"].endswith("/api/v1/trucks/R-1")
    assert response.headers["ETag"].startswith('"') and response.headers["ETag"].endswith('"')
    body = response.get_json()
    assert body["code"] == "R-1" and body["version"] == 1 and body["active"] is True
    assert body["capacity"] == 18000.0 and body["max_stops"] == 6
    stored = db_session.scalars(select(Truck).where(Truck.code == "R-1")).one()
    assert stored.dispatch_cost == 150.0
    again = client.get(response.headers["Location"], headers=auth("viewer"))
    assert again.status_code == 200 and again.headers["ETag"] == response.headers["ETag"]


def test_max_stops_is_optional_and_integral_float_is_accepted(client, auth):
    assert create(client, auth, truck("A", max_stops=None)).get_json()["max_stops"] is None
    body = truck("B")
    del body["max_stops"]
    assert create(client, auth, body).get_json()["max_stops"] is None
    assert create(client, auth, truck("C", max_stops=4.0)).get_json()["max_stops"] == 4


def test_duplicate_code_is_409_and_writes_nothing(client, auth, db_session):
    create(client, auth, truck("DUP"))
    response = client.post(BASE, json=truck("DUP", name="Other"), headers=auth("admin"))
    assert response.status_code == 409
    assert response.mimetype == "application/problem+json"
    assert "DUP" in response.get_json()["detail"]
    assert db_session.scalar(select(func.count()).select_from(Truck)) == 1
    assert db_session.scalars(select(Truck.name)).one() == "Truck DUP"


def test_get_unknown_code_is_404_problem(client, auth):
    response = client.get(f"{BASE}/NOPE", headers=auth("viewer"))
    assert response.status_code == 404
    assert response.get_json()["status"] == 404


def test_list_keyset_pages_with_link_until_the_last_page(client, auth):
    codes = [f"T{i:02d}" for i in range(7)]
    for code in reversed(codes):
        create(client, auth, truck(code))
    seen, url, pages = [], f"{BASE}?limit=3", 0
    while url:
        response = client.get(url, headers=auth("viewer"))
        assert response.status_code == 200
        pages += 1
        seen += [t["code"] for t in response.get_json()["items"]]
        link = response.headers.get("Link")
        if link is None:
            url = None
        else:
            assert link.endswith('; rel="next"') and link.startswith("<")
            url = link[1 : link.index(">")]
            assert "limit=3" in url and "after=" in url
    assert pages == 3
    assert seen == codes


def test_exact_last_page_has_no_link(client, auth):
    for code in ("A", "B"):
        create(client, auth, truck(code))
    response = client.get(f"{BASE}?limit=2", headers=auth("viewer"))
    assert [t["code"] for t in response.get_json()["items"]] == ["A", "B"]
    assert "Link" not in response.headers


def test_limit_out_of_range_is_422(client, auth):
    for bad in ("0", "201", "x"):
        response = client.get(f"{BASE}?limit={bad}", headers=auth("viewer"))
        assert response.status_code == 422, bad
        assert any(e["pointer"].endswith("limit") for e in response.get_json()["errors"])


def test_patch_with_if_match_bumps_version_and_etag(client, auth, db_session):
    etag = create(client, auth, truck("P")).headers["ETag"]
    response = client.patch(f"{BASE}/P", json={"capacity": 20000.0}, headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 200, response.get_json()
    body = response.get_json()
    assert body["version"] == 2 and body["capacity"] == 20000.0
    assert response.headers["ETag"] != etag
    assert db_session.scalars(select(Truck.capacity).where(Truck.code == "P")).one() == 20000.0


def test_patch_with_stale_etag_is_412_and_missing_is_428(client, auth, db_session):
    etag = create(client, auth, truck("P")).headers["ETag"]
    ok = client.patch(f"{BASE}/P", json={"name": "renamed"}, headers=auth("admin", **{"If-Match": etag}))
    assert ok.status_code == 200
    stale = client.patch(f"{BASE}/P", json={"name": "lost update"}, headers=auth("admin", **{"If-Match": etag}))
    assert stale.status_code == 412
    assert stale.mimetype == "application/problem+json"
    missing = client.patch(f"{BASE}/P", json={"name": "no tag"}, headers=auth("admin"))
    assert missing.status_code == 428
    db_session.expire_all()
    assert db_session.scalars(select(Truck.name).where(Truck.code == "P")).one() == "renamed"


def test_patch_cannot_change_code_or_version(client, auth):
    etag = create(client, auth, truck("P")).headers["ETag"]
    for body in ({"code": "Q"}, {"version": 9}):
        response = client.patch(f"{BASE}/P", json=body, headers=auth("admin", **{"If-Match": etag}))
        assert response.status_code == 422
        assert response.get_json()["errors"][0]["pointer"] == "#/" + next(iter(body))


def test_if_none_match_gives_304(client, auth):
    etag = create(client, auth, truck("E")).headers["ETag"]
    response = client.get(f"{BASE}/E", headers=auth("viewer", **{"If-None-Match": etag}))
    assert response.status_code == 304
    assert response.headers["ETag"] == etag
    assert client.get(f"{BASE}/E", headers=auth("viewer", **{"If-None-Match": '"other"'})).status_code == 200


def test_delete_needs_if_match_then_deletes(client, auth, db_session):
    etag = create(client, auth, truck("D")).headers["ETag"]
    assert client.delete(f"{BASE}/D", headers=auth("admin")).status_code == 428
    assert client.delete(f"{BASE}/D", headers=auth("admin", **{"If-Match": '"stale"'})).status_code == 412
    response = client.delete(f"{BASE}/D", headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 204
    assert db_session.scalar(select(func.count()).select_from(Truck)) == 0
    assert client.get(f"{BASE}/D", headers=auth("viewer")).status_code == 404


def test_delete_is_409_while_sites_reference_the_truck(client, auth, db_session):
    etag = create(client, auth, truck("T1")).headers["ETag"]
    create(client, auth, site("S1"), path="/api/v1/sites")
    response = client.delete(f"{BASE}/T1", headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 409
    assert "active=false" in response.get_json()["detail"]
    assert db_session.scalar(select(func.count()).select_from(Truck)) == 1
