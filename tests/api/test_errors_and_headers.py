"""Security headers on every response, problem+json on every error, no stack trace ever."""

from __future__ import annotations

import math
import time

import pytest
from sqlalchemy import select

from service import create_app
from service.auth import PUBLIC, allow, new_token, token_hash
from service.persistence import repository as repo
from service.persistence.models import Token
from service.request_db import dispose

API_HEADERS = {"Cache-Control": "no-store", "X-Content-Type-Options": "nosniff"}
TRUCK = {"code": "T1", "name": "Truck", "dispatch_cost": 150.0, "capacity": 18000.0}


def assert_security_headers(response) -> None:
    for name, value in API_HEADERS.items():
        assert response.headers.get(name) == value, (response.status_code, name)
    csp = response.headers["Content-Security-Policy"]
    assert "frame-ancestors 'none'" in csp and "unsafe-inline" not in csp and "*" not in csp
    assert response.headers.get("X-Request-ID")


def assert_problem(response, status: int) -> dict:
    assert response.status_code == status
    assert response.mimetype == "application/problem+json"
    body = response.get_json()
    assert {"type", "title", "status", "detail", "instance"} <= body.keys()
    assert body["status"] == response.status_code
    assert body["instance"].startswith("/")
    assert isinstance(body["detail"], str) and body["detail"]
    # request_id: the extension member issue 6 asks for (equal to the X-Request-ID header).
    assert set(body) <= {"type", "title", "status", "detail", "instance", "errors", "request_id"}
    assert body["request_id"] == response.headers["X-Request-ID"]
    for entry in body.get("errors", []):
        assert set(entry) == {"pointer", "detail"} and entry["pointer"].startswith("#")
    return body


def _responses(client, auth):
    """A sample of every kind of answer the API gives."""
    yield client.post("/api/v1/trucks", json=TRUCK, headers=auth("admin"))  # 201
    etag = client.get("/api/v1/trucks/T1", headers=auth("viewer")).headers["ETag"]
    yield client.get("/api/v1/trucks/T1", headers=auth("viewer"))  # 200
    yield client.get("/api/v1/trucks/T1", headers=auth("viewer", **{"If-None-Match": etag}))  # 304
    yield client.get("/api/v1/sites/export", headers=auth("viewer"))  # CSV
    yield client.get("/api/v1/openapi.json", headers=auth("viewer"))
    yield client.get("/livez")
    yield client.get("/readyz")
    yield from _errors(client, auth, etag)


def _errors(client, auth, etag=None):
    yield client.get("/api/v1/sites")  # 401
    yield client.post("/api/v1/trucks", json=TRUCK, headers=auth("viewer"))  # 403
    yield client.get("/api/v1/trucks/NOPE", headers=auth("viewer"))  # 404
    yield client.get("/api/v1/nothing-here", headers=auth("viewer"))  # 404, no such route
    yield client.get("/nothing-at-all")  # 404 outside the API
    yield client.put("/api/v1/trucks/T1", json=TRUCK, headers=auth("admin"))  # 405
    yield client.delete("/api/v1/sites", headers=auth("admin"))  # 405
    yield client.post("/api/v1/trucks", json=TRUCK, headers=auth("admin"))  # 409 (when T1 exists)
    yield client.patch("/api/v1/trucks/T1", json={"name": "x"}, headers=auth("admin", **{"If-Match": '"no"'}))  # 412
    yield client.patch("/api/v1/trucks/T1", json={"name": "x"}, headers=auth("admin"))  # 428
    yield client.post("/api/v1/trucks", data="{", headers=auth("admin"), content_type="application/json")  # 400
    yield client.post(
        "/api/v1/trucks", data="a=b", headers=auth("admin"), content_type="application/x-www-form-urlencoded"
    )  # 415
    yield client.post("/api/v1/trucks", json=TRUCK | {"capacity": -1}, headers=auth("admin"))  # 422
    yield client.post(
        "/api/v1/trucks", data="x" * (2 << 20), headers=auth("admin"), content_type="application/json"
    )  # 413


def test_every_response_carries_the_security_headers(client, auth):
    statuses = set()
    for response in _responses(client, auth):
        statuses.add(response.status_code)
        assert_security_headers(response)
    assert {200, 201, 304, 400, 401, 403, 404, 405, 409, 412, 413, 415, 422, 428} <= statuses


def test_every_4xx_is_a_problem_document(client, auth):
    client.post("/api/v1/trucks", json=TRUCK, headers=auth("admin"))
    seen = set()
    for response in _errors(client, auth):
        assert 400 <= response.status_code < 500
        assert_problem(response, response.status_code)
        seen.add(response.status_code)
    assert seen == {400, 401, 403, 404, 405, 409, 412, 413, 415, 422, 428}


def test_405_carries_allow(client, auth):
    response = client.put("/api/v1/trucks/T1", json=TRUCK, headers=auth("admin"))
    assert_problem(response, 405)
    assert set(response.headers["Allow"].replace(" ", "").split(",")) >= {"GET", "PATCH", "DELETE"}
    collection = client.delete("/api/v1/sites", headers=auth("admin"))
    assert {"GET", "POST"} <= set(collection.headers["Allow"].replace(" ", "").split(","))
    assert "Allow" in client.post("/livez").headers


def test_401_carries_www_authenticate(client):
    response = client.get("/api/v1/trucks")
    assert_problem(response, 401)
    assert response.headers["WWW-Authenticate"].startswith("Bearer")


@pytest.fixture
def failing_app(database_url):
    app = create_app({"DATABASE_URL": database_url})

    @allow(PUBLIC)
    def explode():
        raise RuntimeError("boom at /srv/secret/path.py with SELECT password FROM users")

    @allow(PUBLIC)
    def not_finite():
        from flask import jsonify

        return jsonify(value=math.inf)

    app.add_url_rule("/test-only/explode", "explode", explode)
    app.add_url_rule("/test-only/not-finite", "not_finite", not_finite)
    yield app
    dispose(app)


def test_a_forced_500_shows_no_stack_trace(failing_app, caplog):
    response = failing_app.test_client().get("/test-only/explode")
    body = assert_problem(response, 500)
    text = response.get_data(as_text=True)
    for leak in ("Traceback", "RuntimeError", "boom", "/srv/secret", "SELECT", 'File "', ".py"):
        assert leak not in text
    assert body["title"] == "Internal Server Error"
    assert_security_headers(response)
    assert "RuntimeError" in caplog.text  # the details go to the log instead


def test_non_finite_numbers_never_reach_a_client(failing_app):
    response = failing_app.test_client().get("/test-only/not-finite")
    assert_problem(response, 500)
    assert "Infinity" not in response.get_data(as_text=True)


def test_request_id_is_echoed_when_safe_and_replaced_otherwise(client):
    assert client.get("/livez", headers={"X-Request-ID": "abc-123.x_y"}).headers["X-Request-ID"] == "abc-123.x_y"
    for bad in ("has space", "x" * 200, "evil\u2028line", "a;b"):
        got = client.get("/livez", headers={"X-Request-ID": bad}).headers["X-Request-ID"]
        assert got != bad and len(got) == 32


def test_first_failing_write_of_a_fresh_token_is_fast(client, auth, db_session):
    """An error after the token lookup (409, 412) must not leave the 'last used' note waiting behind
    the request's own SQLite write lock (it used to take busy_timeout, 5 s, and then fail)."""
    assert client.post("/api/v1/trucks", json=TRUCK, headers=auth("admin")).status_code == 201
    fresh = []
    for name in ("fresh-1", "fresh-2"):
        token = new_token()
        repo.add_token(db_session, name, "admin", token_hash(token))
        fresh.append({"Authorization": f"Bearer {token}"})
    db_session.commit()
    started = time.perf_counter()
    assert client.post("/api/v1/trucks", json=TRUCK, headers=fresh[0]).status_code == 409
    assert (
        client.patch("/api/v1/trucks/T1", json={"name": "x"}, headers=fresh[1] | {"If-Match": '"stale"'}).status_code
        == 412
    )
    assert time.perf_counter() - started < 2.0
    db_session.expire_all()
    used = db_session.scalars(select(Token.last_used_at).where(Token.name.in_(["fresh-1", "fresh-2"]))).all()
    assert len(used) == 2 and all(u is not None for u in used)


def test_debug_is_off_by_default(database_url, monkeypatch):
    monkeypatch.delenv("FLASK_DEBUG", raising=False)
    app = create_app({"DATABASE_URL": database_url})
    try:
        assert app.debug is False and app.testing is False
    finally:
        dispose(app)


def test_openapi_documents_problem_json(client, auth):
    spec = client.get("/api/v1/openapi.json", headers=auth("viewer")).get_json()
    assert spec["openapi"].startswith("3.1")
    error = spec["components"]["responses"]["UNPROCESSABLE_ENTITY"]["content"]
    assert "application/problem+json" in error
    assert spec["components"]["securitySchemes"]["bearer"]["scheme"] == "bearer"
