"""Every failure a clear answer (issue 14 §3): bad input is a 4xx naming what is wrong, never a
500 and never a 503 "not available" from the database that could not hold it.

Each case here answered 500 or 503 before: ids and page keys beyond their column's range, NUL
bytes and lone surrogates in paths, queries, names and CSV cells, dates near year 1 or 9999,
hostile JSON (deep nesting, huge integers), and ``If-Match: *`` (which let concurrent edits
overwrite each other). Runs on SQLite and PostgreSQL; PostgreSQL is where ids, NUL bytes and
page keys used to reach the driver.
"""

from __future__ import annotations

import datetime as dt
import re
from pathlib import Path

import pytest
from sqlalchemy import func, select

from service.api.fields import DATE_RANGE, FIRST_DATE, ID_MAX, LAST_DATE, WEEK_PATTERN
from service.persistence.models import Plan, Reading, Site, Truck

ROOT = Path(__file__).resolve().parents[2]
TRUCK = {"code": "T1", "name": "Truck one", "dispatch_cost": 150.0, "capacity": 18000.0, "max_stops": 6}
SITE = {
    "code": "S1",
    "name": "Site one",
    "truck": "T1",
    "demand_per_day": 300.0,
    "holding_cost": 0.002,
    "stop_cost": 30.0,
    "tank_capacity": 10000.0,
    "safety_stock": 500.0,
}
CSV_HEADER = "code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity"


@pytest.fixture
def network(client, auth):
    assert client.post("/api/v1/trucks", json=TRUCK, headers=auth("admin")).status_code == 201
    assert client.post("/api/v1/sites", json=SITE, headers=auth("admin")).status_code == 201
    reading = {"level": 5000.0, "measured_at": "2026-12-01T06:00:00+00:00"}
    assert client.post("/api/v1/sites/S1/readings", json=reading, headers=auth("dispatcher")).status_code == 201


@pytest.fixture
def plan_id(client, auth, network) -> int:
    created = client.post("/api/v1/trucks/T1/plans", json={"start_date": "2026-12-07"}, headers=auth("dispatcher"))
    assert created.status_code == 201, created.get_data(as_text=True)
    plan = created.get_json()["id"]
    assert client.post(f"/api/v1/plans/{plan}/activate", headers=auth("dispatcher")).status_code == 200
    return plan


def problem(response, status: int, pointer: str | None = None) -> dict:
    assert response.status_code == status, response.get_data(as_text=True)
    assert response.mimetype == "application/problem+json"
    body = response.get_json()
    assert body["status"] == status and body["detail"]
    if pointer is not None:
        assert pointer in [e["pointer"] for e in body.get("errors", [])], body
    return body


def counts(db_session) -> tuple[int, ...]:
    db_session.expire_all()
    return tuple(db_session.scalar(select(func.count()).select_from(m)) for m in (Truck, Site, Plan, Reading))


# ------------------------------------------------------------------ ids and page keys


def test_plan_ids_beyond_the_column_range_are_404(client, auth, plan_id):
    assert ID_MAX == 2**31 - 1  # the ids are `integer` columns: 4 bytes on PostgreSQL
    for path in (f"/api/v1/plans/{ID_MAX + 1}", f"/api/v1/plans/{2**63}", f"/api/v1/plans/{ID_MAX}", "/api/v1/plans/0"):
        problem(client.get(path, headers=auth("viewer")), 404)
    problem(client.post(f"/api/v1/plans/{ID_MAX + 1}/activate", headers=auth("dispatcher")), 404)
    assert client.get(f"/api/v1/plans/{plan_id}", headers=auth("viewer")).status_code == 200


@pytest.mark.parametrize("path", ["/api/v1/trucks/T1/plans", "/api/v1/sites/S1/readings"])
def test_page_keys_beyond_the_id_range_are_422_naming_the_range(client, auth, plan_id, path):
    for after in (str(ID_MAX + 1), "9" * 30, "0", "-1", "1_0", " 12", "١٢"):
        body = problem(client.get(f"{path}?after={after}", headers=auth("viewer")), 422, "#/query/after")
        if after in (str(ID_MAX + 1), "9" * 30, "0"):
            assert f"between 1 and {ID_MAX}" in body["detail"]
    newest_first = client.get(f"{path}?after={ID_MAX}", headers=auth("viewer"))
    assert newest_first.status_code == 200 and len(newest_first.get_json()["items"]) == 1


def test_the_openapi_document_states_the_id_ranges(client, auth):
    spec = client.get("/api/v1/openapi.json", headers=auth("viewer")).get_json()
    plan_id = next(p for p in spec["paths"]["/api/v1/plans/{plan_id}"]["parameters"] if p["name"] == "plan_id")
    assert (plan_id["schema"]["type"], plan_id["schema"]["minimum"], plan_id["schema"]["maximum"]) == (
        "integer",
        1,
        ID_MAX,
    )
    after = next(p for p in spec["paths"]["/api/v1/trucks/{code}/plans"]["get"]["parameters"] if p["name"] == "after")
    assert (after["schema"]["type"], after["schema"]["minimum"], after["schema"]["maximum"]) == ("integer", 1, ID_MAX)


# ------------------------------------------------------------------ text no column can hold

NUL = "\x00"
SURROGATE = "\ud800"


@pytest.mark.parametrize(
    ("method", "path"),
    [
        ("get", "/api/v1/sites/S%001"),
        ("patch", "/api/v1/sites/S%001"),
        ("delete", "/api/v1/sites/S%001"),
        ("get", "/api/v1/trucks/T%001"),
        ("get", "/api/v1/trucks/T%001/trips?week=2026-W50"),
        ("post", "/api/v1/trucks/T%001/plans"),
        ("get", "/api/v1/sites/S%001/readings"),
    ],
)
def test_a_nul_byte_in_a_path_is_404(client, auth, network, db_session, method, path):
    before = counts(db_session)
    kwargs = {"json": {"name": "x"}} if method in ("patch", "post") else {}
    body = problem(getattr(client, method)(path, headers=auth("admin", **{"If-Match": '"x"'}), **kwargs), 404)
    assert "NUL character (U+0000)" in body["detail"]
    assert counts(db_session) == before


@pytest.mark.parametrize(
    "url",
    [
        "/api/v1/sites?after=S%001",
        "/api/v1/trucks?after=T%001",
        "/api/v1/sites?truck=T%001",
        "/api/v1/trucks/T1/trips?week=2026-W50%00",
        "/api/v1/sites?after%00=S1",
    ],
)
def test_a_nul_byte_in_a_query_is_422_naming_the_parameter(client, auth, network, url):
    name = url.split("?")[1].split("=")[0].replace("%00", NUL)
    body = problem(client.get(url, headers=auth("viewer")), 422, f"#/query/{name}")
    assert "NUL character (U+0000), which cannot be stored" in body["detail"]


@pytest.mark.parametrize("character", [NUL, SURROGATE, "\udfff"])
@pytest.mark.parametrize(
    ("method", "path", "body", "field"),
    [
        ("post", "/api/v1/trucks", TRUCK | {"code": "T9"}, "name"),
        ("post", "/api/v1/sites", SITE | {"code": "S9"}, "name"),
        ("patch", "/api/v1/sites/S1", {}, "name"),
        ("patch", "/api/v1/trucks/T1", {}, "name"),
        ("post", "/api/v1/trucks/T1/plans", {}, "method"),
    ],
)
def test_unstorable_text_in_a_json_field_is_422_naming_the_field(
    client, auth, network, db_session, character, method, path, body, field
):
    before = counts(db_session)
    etag = client.get(path, headers=auth("admin")).headers.get("ETag") if method == "patch" else None
    headers = auth("admin", **({"If-Match": etag} if etag else {}))
    response = getattr(client, method)(path, json=body | {field: f"a{character}b"}, headers=headers)
    detail = problem(response, 422, f"#/{field}")["detail"]
    assert f"U+{ord(character):04X}" in detail and "cannot be stored" in detail
    assert counts(db_session) == before


@pytest.mark.parametrize("character", [NUL, "\\u0000", "\\ud800"])
def test_unstorable_text_in_a_csv_cell_is_422_naming_row_and_column(client, auth, network, db_session, character):
    """A raw NUL byte, and JSON-style escapes, which CSV keeps as they are (only the raw byte is refused)."""
    body = f"{CSV_HEADER}\nS2,Second site,T1,100,0.001,30,10000\nS3,Bad{character}name,T1,100,0.001,30,10000\n"
    response = client.post("/api/v1/sites/import", data=body.encode(), headers=auth("admin"), content_type="text/csv")
    if character != NUL:  # a backslash sequence is just text
        assert response.status_code == 200, response.get_data(as_text=True)
        return
    errors = problem(response, 422, "#/rows/3/name")["errors"]
    assert [e["pointer"] for e in errors] == ["#/rows/3/name"]
    assert "NUL character" in errors[0]["detail"]
    assert counts(db_session)[1] == 1  # only S1: nothing imported


def test_a_nul_byte_in_a_status_page_path_is_a_404_page(client, tokens, network):
    page = client.get("/status/sign-in")
    csrf = re.search(r'name="csrf" value="([^"]+)"', page.get_data(as_text=True))[1]
    assert client.post("/status/sign-in", data={"csrf": csrf, "token": tokens["viewer"]}).status_code == 303
    response = client.get("/status/sites/S%001")
    assert response.status_code == 404 and response.mimetype == "text/html"
    assert "NUL character" in response.get_data(as_text=True)


# ------------------------------------------------------------------ hostile JSON

HOSTILE = {
    "arrays 1 000 deep": "[" * 1000 + "]" * 1000,
    "objects 1 000 deep": '{"a":' * 1000 + "1" + "}" * 1000,
    "a field 1 000 deep": '{"code": "T9", "name": ' + "[" * 1000 + "]" * 1000 + "}",
    "an integer of 5 000 digits": '{"code": "T9", "name": "x", "dispatch_cost": ' + "9" * 5000 + ', "capacity": 1}',
}


@pytest.mark.parametrize("text", HOSTILE.values(), ids=HOSTILE.keys())
@pytest.mark.parametrize("path", ["/api/v1/trucks", "/api/v1/calculations/joint", "/api/v1/trucks/T1/plans"])
def test_hostile_json_is_a_400_problem(client, auth, network, db_session, text, path):
    before = counts(db_session)
    response = client.post(path, data=text, content_type="application/json", headers=auth("admin"))
    body = problem(response, 400, "#")
    assert ("too deeply" in body["detail"]) != ("digits" in body["detail"])
    assert counts(db_session) == before


def test_a_lone_surrogate_as_a_json_escape_is_422(client, auth, network, db_session):
    before = counts(db_session)
    text = '{"code": "T9", "name": "\\ud800", "dispatch_cost": 1, "capacity": 1}'
    response = client.post("/api/v1/trucks", data=text, content_type="application/json", headers=auth("admin"))
    assert "lone surrogate (U+D800)" in problem(response, 422, "#/name")["detail"]
    paired = text.replace("\\ud800", "\\ud83d\\udee2")  # a surrogate *pair* is one character: 🛢
    assert (
        client.post("/api/v1/trucks", data=paired, content_type="application/json", headers=auth("admin")).status_code
        == 201
    )
    assert counts(db_session)[0] == before[0] + 1


# ------------------------------------------------------------------ dates


def test_the_date_range_is_stated_once_and_in_the_readme():
    assert (FIRST_DATE, LAST_DATE) == (dt.date(1970, 1, 1), dt.date(2200, 12, 31))
    assert DATE_RANGE == "between 1970-01-01 and 2200-12-31"
    readme = (ROOT / "README.md").read_text()
    assert "1970-01-01" in readme and "2200-12-31" in readme
    week = re.compile(WEEK_PATTERN)
    accepted = [year for year in range(1000, 10000) if week.match(f"{year}-W10")]
    assert accepted == list(range(FIRST_DATE.year, LAST_DATE.year + 1))


@pytest.mark.parametrize(
    ("start", "status"),
    [
        ("9999-12-20", 422),
        ("0001-01-01", 422),
        ("1969-12-31", 422),
        ("2201-01-01", 422),
        ("1970-01-01", 201),
        ("2200-12-31", 201),
    ],
)
def test_plan_start_dates_outside_the_range_are_422(client, auth, network, start, status):
    response = client.post("/api/v1/trucks/T1/plans", json={"start_date": start}, headers=auth("dispatcher"))
    if status == 201:
        assert response.status_code == 201, response.get_data(as_text=True)
        return
    body = problem(response, 422, "#/start_date")
    assert "Use a date between 1970-01-01 and 2200-12-31" in body["detail"]


@pytest.mark.parametrize(
    ("query", "pointer"),
    [
        ("from=0001-01-01&to=0001-01-07", "#/query/from"),
        ("from=9999-12-25&to=9999-12-31", "#/query/to"),
        ("from=1969-12-31&to=1970-01-06", "#/query/from"),
        ("from=2200-12-31&to=2201-01-01", "#/query/to"),
        ("week=9999-W52", "#/query/week"),
        ("week=0001-W01", "#/query/week"),
        ("week=1969-W52", "#/query/week"),
        ("week=2201-W01", "#/query/week"),
    ],
)
def test_trips_windows_outside_the_range_are_422_saying_the_range(client, auth, plan_id, query, pointer):
    body = problem(client.get(f"/api/v1/trucks/T1/trips?{query}", headers=auth("viewer")), 422, pointer)
    assert "1970" in body["detail"] and "2200" in body["detail"]
    assert "has no ISO week" not in body["detail"]  # 9999-W52 exists; it is out of range


@pytest.mark.parametrize(
    "query", ["from=1970-01-01&to=1970-01-07", "from=2200-12-25&to=2200-12-31", "week=1970-W01", "week=2200-W52"]
)
def test_trips_windows_at_the_ends_of_the_range_answer(client, auth, plan_id, query):
    response = client.get(f"/api/v1/trucks/T1/trips?{query}", headers=auth("viewer"))
    assert response.status_code == 200, response.get_data(as_text=True)


@pytest.mark.parametrize(
    ("measured_at", "status"),
    [
        ("0001-01-01T00:00:00+14:00", 422),
        ("0001-01-01T00:00:00-14:00", 422),
        ("9999-12-31T23:59:59-14:00", 422),
        ("1969-12-31T23:59:59+00:00", 422),
        ("1970-01-01T00:00:00+14:00", 201),
        ("1970-01-01T00:00:00+00:00", 201),
    ],
)
def test_reading_times_outside_the_range_are_422(client, auth, network, db_session, measured_at, status):
    response = client.post(
        "/api/v1/sites/S1/readings", json={"level": 100.0, "measured_at": measured_at}, headers=auth("dispatcher")
    )
    if status == 201:
        assert response.status_code == 201, response.get_data(as_text=True)
        return
    body = problem(response, 422, "#/measured_at")
    assert "between 1970-01-01 and 2200-12-31" in body["detail"]
    assert counts(db_session)[3] == 1


def test_range_messages_read_as_a_person_writes_them(client, auth, plan_id):
    body = problem(client.get("/api/v1/trucks/T1/trips?from=0001-01-01&to=9999-12-31", headers=auth("viewer")), 422)
    assert body["detail"] == (
        "The request is not valid: #/query/from: Use a date between 1970-01-01 and 2200-12-31; "
        "#/query/to: Use a date between 1970-01-01 and 2200-12-31."
    )
    body = problem(client.get(f"/api/v1/trucks/T1/plans?after={ID_MAX + 1}", headers=auth("viewer")), 422)
    assert body["detail"] == "The request is not valid: #/query/after: Must be an id between 1 and 2147483647."


# ------------------------------------------------------------------ If-Match: *


@pytest.mark.parametrize(
    ("method", "path", "body"),
    [
        ("patch", "/api/v1/sites/S1", {"stop_cost": 31.0}),
        ("patch", "/api/v1/trucks/T1", {"dispatch_cost": 151.0}),
        ("delete", "/api/v1/sites/S1", None),
        ("delete", "/api/v1/trucks/T1", None),
    ],
)
@pytest.mark.parametrize("if_match", ["*", " * ", '"nope", *'])
def test_if_match_star_is_428_asking_for_a_real_etag(client, auth, network, db_session, method, path, body, if_match):
    """``If-Match: *`` matched any version, so concurrent edits overwrote each other (71 of 90 lost)."""
    before = client.get(path, headers=auth("viewer"))
    kwargs = {"json": body} if body is not None else {}
    response = getattr(client, method)(path, headers=auth("admin", **{"If-Match": if_match}), **kwargs)
    detail = problem(response, 428)["detail"]
    assert "ETag" in detail and "GET" in detail
    after = client.get(path, headers=auth("viewer"))
    assert after.status_code == 200 and after.headers["ETag"] == before.headers["ETag"]
    assert after.get_json() == before.get_json()
    # The ETag from the GET still works.
    edit = getattr(client, method)(path, headers=auth("admin", **{"If-Match": before.headers["ETag"]}), **kwargs)
    assert edit.status_code in (200, 204, 409), edit.get_data(as_text=True)
