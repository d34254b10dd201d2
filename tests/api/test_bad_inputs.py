"""Bad inputs to POST /api/v1/sites and /api/v1/trucks: a clear problem naming the field, nothing written.

Bodies are sent as raw JSON text, because NaN / Infinity / 1e400 are not something Python's
``json.dumps`` would produce on purpose (and Python's parser, like Flask's, reads them).
"""

from __future__ import annotations

import json

import pytest
from sqlalchemy import func, select

from service.persistence.models import Site, Truck

TRUCK = {"code": "T1", "name": "Truck one", "dispatch_cost": 150.0, "capacity": 18000.0, "max_stops": 6}
SITE = {
    "code": "S1",
    "name": "Site one",
    "truck": "T0",
    "demand_per_day": 300.0,
    "holding_cost": 0.001,
    "stop_cost": 30.0,
    "tank_capacity": 10000.0,
    "safe_fill": 0.9,
    "safety_stock": 100.0,
    "latitude": 51.7,
    "longitude": -3.4,
}

SPECIAL = {
    "NaN": "NaN",
    "Infinity": "Infinity",
    "-Infinity": "-Infinity",
    "1e400": "1e400",
    "-1e400": "-1e400",
    "10**400": "1" + "0" * 400,
    "string 5": '"5"',
    "string 12.5": '" 12.5 "',
    "true": "true",
    "false": "false",
    "list": "[]",
    "object": "{}",
}

#: field → (required, must be > 0, may be negative, is integer)
SITE_NUMBERS = {
    "demand_per_day": (True, True, False, False),
    "holding_cost": (True, False, False, False),
    "stop_cost": (True, False, False, False),
    "tank_capacity": (True, True, False, False),
    "safe_fill": (False, True, False, False),
    "safety_stock": (False, False, False, False),
    "latitude": (False, False, True, False),
    "longitude": (False, False, True, False),
    "service_level": (False, True, False, False),  # issue 15
    "lead_time_days": (False, False, False, False),
    "base_temperature": (False, False, True, False),
}
TRUCK_NUMBERS = {
    "dispatch_cost": (True, False, False, False),
    "capacity": (True, True, False, False),
    "max_stops": (False, True, False, True),
    "trips_per_day": (False, True, False, True),
    "cost_per_km": (False, False, False, False),  # issue 16
}
NULLABLE = {"latitude", "longitude", "max_stops", "service_level"}


def _cases():
    for path, numbers, _base in (("/api/v1/sites", SITE_NUMBERS, SITE), ("/api/v1/trucks", TRUCK_NUMBERS, TRUCK)):
        for field, (_required, positive, signed, integer) in numbers.items():
            for label, raw in SPECIAL.items():
                yield pytest.param(path, field, raw, id=f"{path.rsplit('/', 1)[1]}-{field}-{label}")
            if field not in NULLABLE:
                yield pytest.param(path, field, "null", id=f"{path.rsplit('/', 1)[1]}-{field}-null")
            if not signed:
                yield pytest.param(path, field, "-1", id=f"{path.rsplit('/', 1)[1]}-{field}--1")
                yield pytest.param(path, field, "-0.000001", id=f"{path.rsplit('/', 1)[1]}-{field}-tiny-negative")
            if positive:
                yield pytest.param(path, field, "0", id=f"{path.rsplit('/', 1)[1]}-{field}-0")
            if integer:
                yield pytest.param(path, field, "12.7", id=f"{path.rsplit('/', 1)[1]}-{field}-12.7")
                yield pytest.param(path, field, "1001", id=f"{path.rsplit('/', 1)[1]}-{field}-above-max")
            if field == "safe_fill":
                yield pytest.param(path, field, "1.5", id="sites-safe_fill-above-1")
            if field in ("latitude", "longitude", "base_temperature"):
                yield pytest.param(path, field, "181", id=f"sites-{field}-out-of-range")
        if path.endswith("sites"):
            for field in ("demand_per_day", "tank_capacity", "holding_cost", "stop_cost"):
                yield pytest.param(path, field, "1e13", id=f"sites-{field}-above-ceiling")


CASES = list(_cases())


def raw_body(base: dict, field: str, raw: str) -> str:
    return json.dumps(base | {field: "__VALUE__"}).replace('"__VALUE__"', raw)


@pytest.fixture
def counted(client, auth, db_session):
    """A truck T0 exists; returns a function counting (trucks, sites)."""
    body = TRUCK | {"code": "T0"}
    assert client.post("/api/v1/trucks", json=body, headers=auth("admin")).status_code == 201

    def counts():
        return (
            db_session.scalar(select(func.count()).select_from(Truck)),
            db_session.scalar(select(func.count()).select_from(Site)),
        )

    return counts


def assert_problem(response, status: int, field: str | None = None) -> dict:
    assert response.status_code == status, response.get_data(as_text=True)
    assert response.mimetype == "application/problem+json"
    body = response.get_json()
    assert body["status"] == status and body["title"] and body["detail"]
    text = response.get_data(as_text=True)
    assert "NaN" not in text and "Infinity" not in text
    if field is not None:
        pointers = [e["pointer"] for e in body.get("errors", [])]
        assert f"#/{field}" in pointers or field in body["detail"], body
    return body


def test_the_table_is_large_enough():
    assert len(CASES) >= 30
    assert {c.values[1] for c in CASES} == set(SITE_NUMBERS) | set(TRUCK_NUMBERS)


@pytest.mark.parametrize(("path", "field", "raw"), CASES)
def test_bad_number_is_422_naming_the_field_and_writes_nothing(client, auth, counted, path, field, raw):
    base = SITE if path.endswith("sites") else TRUCK
    before = counted()
    response = client.post(
        path, data=raw_body(base, field, raw), headers=auth("admin"), content_type="application/json"
    )
    body = assert_problem(response, 422, field)
    assert [e["pointer"] for e in body["errors"]] == [f"#/{field}"]
    assert counted() == before


@pytest.mark.parametrize("path", ["/api/v1/sites", "/api/v1/trucks"])
@pytest.mark.parametrize("field", ["code", "name"])
def test_missing_required_text_is_422(client, auth, counted, path, field):
    base = dict(SITE if path.endswith("sites") else TRUCK)
    del base[field]
    before = counted()
    assert_problem(client.post(path, json=base, headers=auth("admin")), 422, field)
    assert counted() == before


@pytest.mark.parametrize("code", ["", "has space", "x" * 41, "semi;colon", "ünï", "a/b"])
def test_bad_code_is_422(client, auth, counted, code):
    before = counted()
    assert_problem(client.post("/api/v1/sites", json=SITE | {"code": code}, headers=auth("admin")), 422, "code")
    assert counted() == before


@pytest.mark.parametrize("path", ["/api/v1/sites", "/api/v1/trucks"])
@pytest.mark.parametrize(
    "field", ["id", "version", "created_at", "updated_at", "truck_id", "demand_gal_per_day", "unit", "currency"]
)
def test_unknown_and_read_only_fields_are_refused(client, auth, counted, path, field):
    base = SITE if path.endswith("sites") else TRUCK
    before = counted()
    body = assert_problem(client.post(path, json=base | {field: 1}, headers=auth("admin")), 422, field)
    assert "Unknown field" in body["errors"][0]["detail"]
    assert counted() == before


@pytest.mark.parametrize("field", ["id", "version", "created_at", "code", "extra"])
def test_patch_refuses_read_only_and_unknown_fields(client, auth, counted, db_session, field):
    created = client.post("/api/v1/sites", json=SITE, headers=auth("admin"))
    etag = created.headers["ETag"]
    response = client.patch(
        "/api/v1/sites/S1", json={field: 5, "name": "changed"}, headers=auth("admin", **{"If-Match": etag})
    )
    assert_problem(response, 422, field)
    assert db_session.scalars(select(Site.name)).one() == "Site one"


@pytest.mark.parametrize("raw", ["NaN", "Infinity", "1e400", '"5"', "true", "null", "0", "-1"])
def test_patch_bad_numbers_are_422(client, auth, counted, db_session, raw):
    etag = client.post("/api/v1/sites", json=SITE, headers=auth("admin")).headers["ETag"]
    response = client.patch(
        "/api/v1/sites/S1",
        data=raw_body({}, "demand_per_day", raw),
        headers=auth("admin", **{"If-Match": etag}),
        content_type="application/json",
    )
    assert_problem(response, 422, "demand_per_day")
    assert db_session.scalars(select(Site.version)).one() == 1


@pytest.mark.parametrize(
    "content_type", ["text/plain", "application/x-www-form-urlencoded", "text/csv", "application/xml"]
)
def test_wrong_content_type_is_415(client, auth, counted, content_type):
    before = counted()
    response = client.post("/api/v1/trucks", data=json.dumps(TRUCK), headers=auth("admin"), content_type=content_type)
    assert_problem(response, 415)
    assert counted() == before


def test_csv_import_refuses_json_with_415(client, auth, counted):
    response = client.post("/api/v1/sites/import", json=[SITE], headers=auth("admin"))
    assert_problem(response, 415)


@pytest.mark.parametrize("text", ['{"code": "T1",', "{'code': 'T1'}", "[1, 2", "not json at all", "{}}"])
def test_malformed_json_is_400(client, auth, counted, text):
    before = counted()
    response = client.post("/api/v1/trucks", data=text, headers=auth("admin"), content_type="application/json")
    assert_problem(response, 400)
    assert counted() == before


def test_json_that_is_not_an_object_is_422(client, auth, counted):
    assert_problem(client.post("/api/v1/trucks", json=[TRUCK], headers=auth("admin")), 422)
    assert_problem(client.post("/api/v1/trucks", json="T1", headers=auth("admin")), 422)


def test_oversized_json_body_is_413(client, app, auth, counted):
    limit = app.config["ULLAGE_SETTINGS"].max_body_bytes
    assert limit == 1 << 20
    body = json.dumps(TRUCK | {"name": "x" * limit})
    before = counted()
    assert_problem(
        client.post("/api/v1/trucks", data=body, headers=auth("admin"), content_type="application/json"), 413
    )
    assert counted() == before


def test_oversized_csv_body_is_413(client, auth, counted):
    header = "code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity\n"
    rows = "".join(f"S{i},{'n' * 150},T0,1,0,0,10\n" for i in range(7000))
    assert len(header + rows) > 1 << 20
    before = counted()
    response = client.post("/api/v1/sites/import", data=header + rows, headers=auth("admin"), content_type="text/csv")
    assert_problem(response, 413)
    assert counted() == before


@pytest.mark.parametrize(
    ("method", "url"),
    [
        ("get", "/api/v1/sites?wek=2026-W01"),
        ("get", "/api/v1/sites?truck=T0&limt=5"),
        ("get", "/api/v1/trucks?page=2"),
        ("get", "/api/v1/trucks/T0?verbose=1"),
        ("get", "/api/v1/settings?x=1"),
        ("get", "/api/v1/sites/export?format=xlsx"),
        ("post", "/api/v1/trucks?dry_run=true"),
        ("post", "/api/v1/sites/import?dryrun=true"),
    ],
)
def test_unknown_query_parameter_is_422(client, auth, counted, method, url):
    before = counted()
    kwargs = {"json": TRUCK} if url.startswith("/api/v1/trucks?") else {}
    if "import" in url:
        kwargs = {
            "data": "code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity\n",
            "content_type": "text/csv",
        }
    response = getattr(client, method)(url, headers=auth("admin"), **kwargs)
    body = assert_problem(response, 422)
    name = url.split("?", 1)[1].split("&")[-1].split("=")[0]
    assert f"#/query/{name}" in [e["pointer"] for e in body["errors"]]
    assert counted() == before
