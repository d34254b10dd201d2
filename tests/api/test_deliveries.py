"""Recorded deliveries and the bulk uploads (issue 15): POST/GET /sites/{code}/deliveries,
POST /deliveries and POST /readings (JSON array or CSV, all or nothing)."""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import func, select

from service.persistence.models import Delivery, Reading
from tests.api.one_truck import post_network

URL = "/api/v1/sites/A0/deliveries"


@pytest.fixture
def network(client, auth):
    post_network(client, auth, [200.0] * 2)


def ago(**delta) -> str:
    return (dt.datetime.now(dt.UTC) - dt.timedelta(**delta)).replace(microsecond=0).isoformat()


def count(db_session, model) -> int:
    return db_session.scalar(select(func.count()).select_from(model))


def test_post_and_list_newest_delivered_first(client, auth, network, db_session):
    body = {"quantity": 4000, "delivered_at": ago(days=3), "truck": "T1", "level_before": 900, "level_after": 4850}
    response = client.post(URL, json=body | {"note": "left gate open"}, headers=auth("dispatcher"))
    assert response.status_code == 201, response.get_json()
    first = response.get_json()
    assert first["site"] == "A0" and first["truck"] == "T1" and first["quantity"] == 4000
    assert first["note"] == "left gate open" and first["created_by"] == "test-dispatcher"
    assert response.headers["Location"].endswith(URL)
    # Recorded later but delivered earlier: listed after the first one.
    older = client.post(URL, json={"quantity": 3000, "delivered_at": ago(days=10)}, headers=auth("admin"))
    newer = client.post(URL, json={"quantity": 2000, "delivered_at": ago(days=1)}, headers=auth("admin"))
    assert older.status_code == newer.status_code == 201
    items = client.get(URL, headers=auth("viewer")).get_json()["items"]
    assert [i["quantity"] for i in items] == [2000, 4000, 3000]
    assert items[1] == first  # the POST answer is what every GET shows
    # Paged: two, then the rest via the Link header.
    page1 = client.get(URL + "?limit=2", headers=auth("viewer"))
    assert [i["quantity"] for i in page1.get_json()["items"]] == [2000, 4000]
    link = page1.headers["Link"].split(";")[0].strip("<>")
    page2 = client.get(link, headers=auth("viewer"))
    assert [i["quantity"] for i in page2.get_json()["items"]] == [3000] and "Link" not in page2.headers
    assert count(db_session, Delivery) == 3


def test_same_checks_as_readings(client, auth, network, db_session):
    future = (dt.datetime.now(dt.UTC) + dt.timedelta(hours=1)).isoformat()
    cases = [
        ({"quantity": 100, "delivered_at": future}, "#/delivered_at"),
        ({"quantity": 100, "delivered_at": ago(hours=1), "level_after": 10000.5}, "#/level_after"),
        ({"quantity": 100, "delivered_at": ago(hours=1), "level_before": 10001}, "#/level_before"),
        ({"quantity": 0, "delivered_at": ago(hours=1)}, "#/quantity"),
        ({"quantity": 100, "delivered_at": "2026-12-01T06:00:00"}, "#/delivered_at"),  # no offset
        ({"quantity": 100, "delivered_at": ago(hours=1), "truck": "NOPE"}, "#/truck"),
    ]
    for body, pointer in cases:
        response = client.post(URL, json=body, headers=auth("dispatcher"))
        assert response.status_code == 422, body
        assert pointer in [e["pointer"] for e in response.get_json()["errors"]], response.get_json()
    assert client.post(URL, json=cases[0][0], headers=auth("viewer")).status_code == 403
    assert client.post("/api/v1/sites/NOPE/deliveries", json=cases[1][0], headers=auth("admin")).status_code == 404
    assert count(db_session, Delivery) == 0


def test_idempotency_key_records_once(client, auth, network, db_session):
    body = {"quantity": 2500, "delivered_at": ago(hours=5)}
    headers = auth("dispatcher", **{"Idempotency-Key": '"delivery-42"'})
    first = client.post(URL, json=body, headers=headers)
    again = client.post(URL, json=body, headers=headers)
    assert first.status_code == again.status_code == 201
    assert again.headers.get("Ullage-Replayed") == "true" and again.get_json() == first.get_json()
    assert count(db_session, Delivery) == 1
    other = client.post(URL, json=body | {"quantity": 2600}, headers=headers)
    assert other.status_code == 422 and other.get_json()["type"].endswith("/idempotency-key-reused")
    # A refused request frees its key for a corrected retry.
    bad = auth("dispatcher", **{"Idempotency-Key": "k2"})
    assert client.post(URL, json=body | {"level_after": 99999}, headers=bad).status_code == 422
    assert client.post(URL, json=body, headers=bad).status_code == 201
    assert count(db_session, Delivery) == 2


def test_bulk_readings_json_and_csv_all_or_nothing(client, auth, network, db_session):
    rows = [
        {"site": "A0", "level": 5000, "measured_at": ago(days=2)},
        {"site": "A1", "level": 4000, "measured_at": ago(days=1)},
    ]
    response = client.post("/api/v1/readings", json=rows, headers=auth("dispatcher"))
    assert response.status_code == 201 and response.get_json() == {"created": 2}
    bad = rows + [
        {"site": "A1", "level": 10001, "measured_at": ago(hours=1)},
        {"site": "ZZ", "level": 1, "measured_at": ago(hours=1)},
    ]
    response = client.post("/api/v1/readings", json=bad, headers=auth("dispatcher"))
    assert response.status_code == 422
    pointers = [e["pointer"] for e in response.get_json()["errors"]]
    assert pointers == ["#/2/level", "#/3/site"]
    assert count(db_session, Reading) == 2
    csv = f"site,level,measured_at\r\nA0,4500,{ago(hours=30)}\r\nA1,3900.5,{ago(hours=20)}\r\n"
    response = client.post("/api/v1/readings", data=csv, headers=auth("dispatcher", **{"Content-Type": "text/csv"}))
    assert response.status_code == 201 and response.get_json() == {"created": 2}
    csv_bad = f"site,level,measured_at\r\nA0,4500,{ago(hours=3)}\r\nA1,12,5,{ago(hours=2)}\r\nA1,abc,{ago(hours=2)}\r\n"
    response = client.post("/api/v1/readings", data=csv_bad, headers=auth("admin", **{"Content-Type": "text/csv"}))
    assert response.status_code == 422
    assert [e["pointer"] for e in response.get_json()["errors"]] == ["#/rows/3", "#/rows/4/level"]
    assert count(db_session, Reading) == 4
    too_many = [rows[0]] * 5001
    assert client.post("/api/v1/readings", json=too_many, headers=auth("dispatcher")).status_code == 422
    too_many_csv = "site,level,measured_at\r\n" + f"A0,1,{ago(hours=1)}\r\n" * 5001
    response = client.post(
        "/api/v1/readings", data=too_many_csv, headers=auth("dispatcher", **{"Content-Type": "text/csv"})
    )
    assert response.status_code == 413 and response.get_json()["type"].endswith("/too-many-rows")
    assert (
        client.post(
            "/api/v1/readings", data="x", headers=auth("dispatcher", **{"Content-Type": "text/plain"})
        ).status_code
        == 415
    )


def test_bulk_deliveries(client, auth, network, db_session):
    csv = (
        "site,quantity,delivered_at,truck,level_before,level_after,note\r\n"
        f"A0,3000,{ago(days=2)},T1,1000,3990,\r\n"
        f'A1,2000,{ago(days=1)},,,,"late, rain"\r\n'
    )
    response = client.post("/api/v1/deliveries", data=csv, headers=auth("dispatcher", **{"Content-Type": "text/csv"}))
    assert response.status_code == 201, response.get_json()
    a1 = client.get("/api/v1/sites/A1/deliveries", headers=auth("viewer")).get_json()["items"]
    assert a1[0]["note"] == "late, rain" and a1[0]["truck"] is None and a1[0]["level_after"] is None
    future = (dt.datetime.now(dt.UTC) + dt.timedelta(days=1)).isoformat()
    rows = [
        {"site": "A0", "quantity": 10, "delivered_at": ago(hours=1)},
        {"site": "A0", "quantity": 10, "delivered_at": future, "truck": "T9"},
    ]
    response = client.post("/api/v1/deliveries", json=rows, headers=auth("dispatcher"))
    assert response.status_code == 422
    assert [e["pointer"] for e in response.get_json()["errors"]] == ["#/1/delivered_at", "#/1/truck"]
    assert count(db_session, Delivery) == 2


def test_site_with_deliveries_is_deleted_with_them(client, auth, network, db_session):
    assert (
        client.post(URL, json={"quantity": 100, "delivered_at": ago(hours=2)}, headers=auth("admin")).status_code == 201
    )
    etag = client.get("/api/v1/sites/A0", headers=auth("admin")).headers["ETag"]
    assert client.delete("/api/v1/sites/A0", headers=auth("admin", **{"If-Match": etag})).status_code == 204
    assert count(db_session, Delivery) == 0
