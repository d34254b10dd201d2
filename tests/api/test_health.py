"""/livez (no I/O) and /readyz (database reachable, at the migration head); 503s are problems."""

from __future__ import annotations

import re

import pytest
from sqlalchemy import create_engine, text

from service import create_app
from service.health import migration_head
from service.request_db import dispose

UNREACHABLE = "postgresql+psycopg://postgres@127.0.0.1:1/none"
#: Things a health answer must never show: connection strings, hosts, file paths, versions.
LEAKS = re.compile(
    r"postgres|sqlite|psycopg|127\.0\.0\.1|/tmp|\.db\b|alembic|werkzeug|flask|python|\d+\.\d+\.\d+", re.IGNORECASE
)


@pytest.fixture
def down_app():
    app = create_app({"DATABASE_URL": UNREACHABLE, "TESTING": True})
    yield app
    dispose(app)


def assert_not_ready(response) -> dict:
    assert response.status_code == 503
    assert response.mimetype == "application/problem+json"
    assert int(response.headers["Retry-After"]) > 0
    body = response.get_json()
    assert body["status"] == 503 and body["title"] == "Service Unavailable"
    assert not LEAKS.search(response.get_data(as_text=True)), response.get_data(as_text=True)
    assert "Traceback" not in response.get_data(as_text=True)
    return body


def test_livez_answers_without_auth_and_without_a_database(down_app):
    response = down_app.test_client().get("/livez")
    assert response.status_code == 200
    assert response.get_json() == {"status": "pass"}
    assert response.headers["Cache-Control"] == "no-store"


def test_readyz_is_503_when_the_database_is_unreachable(down_app):
    assert_not_ready(down_app.test_client().get("/readyz"))


def test_api_is_503_not_a_crash_when_the_database_is_unreachable(down_app):
    client = down_app.test_client()
    for method, url in (("get", "/api/v1/sites"), ("post", "/api/v1/trucks"), ("get", "/api/v1/settings")):
        response = getattr(client, method)(url, headers={"Authorization": "Bearer ull_whatever"}, json={})
        assert_not_ready(response)
    assert client.get("/livez").status_code == 200  # still alive afterwards


def test_readyz_is_200_on_a_migrated_database(client):
    response = client.get("/readyz")
    assert response.status_code == 200
    assert response.get_json() == {"status": "pass"}
    assert not LEAKS.search(response.get_data(as_text=True))


def test_readyz_is_503_on_an_empty_sqlite_file(tmp_path):
    path = tmp_path / "empty.db"
    path.touch()
    app = create_app({"DATABASE_URL": f"sqlite:///{path}"})
    try:
        assert_not_ready(app.test_client().get("/readyz"))
    finally:
        dispose(app)


def test_readyz_is_503_when_the_schema_is_not_at_head(app, database_url):
    engine = create_engine(database_url)
    try:
        with engine.begin() as conn:
            conn.execute(text("UPDATE alembic_version SET version_num = '0000_older'"))
        body = assert_not_ready(app.test_client().get("/readyz"))
        assert "ullage db upgrade" in body["detail"]
        assert migration_head() not in body["detail"] and "0000_older" not in body["detail"]
    finally:
        with engine.begin() as conn:
            conn.execute(text("UPDATE alembic_version SET version_num = :head"), {"head": migration_head()})
        engine.dispose()
    assert app.test_client().get("/readyz").status_code == 200


def test_health_routes_need_no_token_but_tolerate_one(client, auth):
    assert client.get("/livez", headers=auth("viewer")).status_code == 200
    assert client.get("/readyz", headers={"Authorization": "Bearer nonsense"}).status_code == 200
    assert client.post("/livez").status_code == 405
