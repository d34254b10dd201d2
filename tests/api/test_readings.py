"""Tank readings: POST/GET /api/v1/sites/{code}/readings (issue 4 §4)."""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import func, select

from service.persistence.models import Reading
from tests.api.one_truck import post_network

URL = "/api/v1/sites/A0/readings"


@pytest.fixture
def network(client, auth):
    post_network(client, auth, [200.0 + 100 * i for i in range(3)])


def ago(**delta) -> str:
    return (dt.datetime.now(dt.UTC) - dt.timedelta(**delta)).isoformat()


def count(db_session) -> int:
    return db_session.scalar(select(func.count()).select_from(Reading))


def test_post_201(client, auth, network, db_session):
    measured = (dt.datetime.now(dt.UTC) - dt.timedelta(hours=3)).replace(microsecond=0)
    response = client.post(URL, json={"level": 4200.5, "measured_at": measured.isoformat()}, headers=auth("dispatcher"))
    assert response.status_code == 201, response.get_json()
    body = response.get_json()
    assert {"id", "site", "level", "measured_at", "created_at", "created_by"} <= set(body)
    assert body["site"] == "A0" and body["level"] == 4200.5 and body["created_by"] == "test-dispatcher"
    assert dt.datetime.fromisoformat(body["measured_at"]) == measured
    assert response.headers["Location"].endswith(URL)
    assert count(db_session) == 1
    # Other offsets are the same instant; admins may post too; level 0 and = tank_capacity are allowed.
    plus2 = measured.astimezone(dt.timezone(dt.timedelta(hours=2))).isoformat()
    response = client.post(URL, json={"level": 0, "measured_at": plus2}, headers=auth("admin"))
    assert response.status_code == 201
    assert dt.datetime.fromisoformat(response.get_json()["measured_at"]) == measured
    # The answer to the POST is the reading as every later GET shows it (in UTC).
    listed = client.get(URL, headers=auth("viewer")).get_json()["items"][0]
    assert listed == response.get_json()
    assert listed["measured_at"].endswith("+00:00")
    response = client.post(URL, json={"level": 10000, "measured_at": ago(hours=1)}, headers=auth("admin"))
    assert response.status_code == 201
    assert count(db_session) == 3


@pytest.mark.parametrize(
    "body, pointer",
    [
        ({"level": 10000.01, "measured_at": None}, "#/level"),
        ({"level": -1, "measured_at": None}, "#/level"),
        ({"level": 100, "measured_at": "2026-01-05T10:00:00"}, "#/measured_at"),
        ({"level": 100, "measured_at": "2026-01-05"}, "#/measured_at"),
        ({"level": 100, "measured_at": "yesterday"}, "#/measured_at"),
        ({"level": 100, "measured_at": "future"}, "#/measured_at"),
        ({"measured_at": None}, "#/level"),
        ({"level": 100}, "#/measured_at"),
        ({"level": "100", "measured_at": None}, "#/level"),
        ({"level": 100, "measured_at": None, "note": "x"}, "#/note"),
    ],
)
def test_post_422(client, auth, network, db_session, body, pointer):
    body = dict(body)
    if body.get("measured_at") is None and "measured_at" in body:
        body["measured_at"] = ago(hours=1)
    if body.get("measured_at") == "future":
        body["measured_at"] = (dt.datetime.now(dt.UTC) + dt.timedelta(hours=1)).isoformat()
    response = client.post(URL, json=body, headers=auth("dispatcher"))
    assert response.status_code == 422, response.get_json()
    assert response.mimetype == "application/problem+json"
    assert pointer in [e["pointer"] for e in response.get_json()["errors"]]
    assert count(db_session) == 0


def test_unknown_site_404_and_roles(client, auth, network, db_session):
    body = {"level": 100, "measured_at": ago(hours=1)}
    assert client.post("/api/v1/sites/NOPE/readings", json=body, headers=auth("dispatcher")).status_code == 404
    assert client.get("/api/v1/sites/NOPE/readings", headers=auth("viewer")).status_code == 404
    response = client.post(URL, json=body, headers=auth("viewer"))
    assert response.status_code == 403 and response.mimetype == "application/problem+json"
    assert client.post(URL, json=body).status_code == 401
    assert client.get(URL).status_code == 401
    assert count(db_session) == 0


def test_get_newest_first_paginated_viewer_allowed(client, auth, network):
    for hours in (30, 5, 50, 1, 12):
        body = {"level": 1000 + hours, "measured_at": ago(hours=hours)}
        assert client.post(URL, json=body, headers=auth("dispatcher")).status_code == 201
    other = {"level": 1, "measured_at": ago(hours=2)}
    assert client.post("/api/v1/sites/A1/readings", json=other, headers=auth("dispatcher")).status_code == 201
    response = client.get(URL, headers=auth("viewer"))
    assert response.status_code == 200
    items = response.get_json()["items"]
    assert len(items) == 5 and {i["site"] for i in items} == {"A0"}
    # Newest first (the order they were recorded, newest record first).
    assert [i["level"] for i in items] == [1012, 1001, 1050, 1005, 1030]
    first = client.get(f"{URL}?limit=2", headers=auth("viewer"))
    link = first.headers["Link"]
    assert link.endswith('rel="next"')
    nxt = client.get(link[link.index("<") + 1 : link.index(">")], headers=auth("viewer")).get_json()["items"]
    assert [i["level"] for i in first.get_json()["items"] + nxt] == [1012, 1001, 1050, 1005]


def test_reading_never_changes_a_recorded_plan(client, auth, network):
    today = dt.datetime.now(dt.UTC).date()
    plan = client.post(
        "/api/v1/trucks/T1/plans",
        json={"start_date": (today - dt.timedelta(days=2)).isoformat()},
        headers=auth("dispatcher"),
    )
    assert plan.status_code == 201
    url = plan.headers["Location"]
    assert client.post(f"{url}/activate", headers=auth("dispatcher")).status_code == 200
    before = client.get(url, headers=auth("viewer")).get_json()
    for code, level in (("A0", 600.0), ("A1", 9000.0), ("A2", 0.0)):
        body = {"level": level, "measured_at": ago(hours=2)}
        assert client.post(f"/api/v1/sites/{code}/readings", json=body, headers=auth("dispatcher")).status_code == 201
    week = client.get(
        f"/api/v1/trucks/T1/trips?from={today}&to={today + dt.timedelta(days=30)}", headers=auth("viewer")
    )
    assert week.status_code == 200
    after = client.get(url, headers=auth("viewer")).get_json()
    assert after == before
