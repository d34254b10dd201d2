"""Messages a person understands (issue 18): quoted ETags, the week form, UTC offsets, number
limits written as people write them, and CSV files as spreadsheets save them."""

from __future__ import annotations

import pytest

from service.api.fields import readable
from service.errors import PROBLEM_BASE

SITE = {
    "code": "S1",
    "name": "Site one",
    "truck": "T1",
    "demand_per_day": 100.0,
    "holding_cost": 0.001,
    "stop_cost": 30.0,
    "tank_capacity": 10000.0,
}
CSV_HEADER = "code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity"


@pytest.fixture
def truck(client, auth):
    body = {"code": "T1", "name": "Truck", "dispatch_cost": 150.0, "capacity": 18000.0}
    assert client.post("/api/v1/trucks", json=body, headers=auth("admin")).status_code == 201


@pytest.fixture
def site(client, auth, truck):
    response = client.post("/api/v1/sites", json=SITE, headers=auth("admin"))
    assert response.status_code == 201
    return response.headers["ETag"]


def detail(response) -> str:
    return response.get_json()["detail"]


# --- ETags ---------------------------------------------------------------------------------------


def test_unquoted_etag_in_if_match_says_it_must_be_quoted(client, auth, site):
    bare = site.strip('"')
    response = client.patch("/api/v1/sites/S1", json={"name": "x"}, headers=auth("admin", **{"If-Match": bare}))
    assert response.status_code == 400
    body = response.get_json()
    assert body["type"] == PROBLEM_BASE + "bad-etag"
    assert "double quotes" in body["detail"] and f'"{bare}"' in body["detail"]
    assert "changed since" not in body["detail"]
    assert body["errors"][0]["pointer"] == "#/header/If-Match"
    # Quoted, the same tag is accepted: the message pointed at the real fix.
    quoted = client.patch("/api/v1/sites/S1", json={"name": "x"}, headers=auth("admin", **{"If-Match": site}))
    assert quoted.status_code == 200


def test_unquoted_etag_in_if_none_match_says_it_must_be_quoted(client, auth, site):
    response = client.get("/api/v1/sites/S1", headers=auth("viewer", **{"If-None-Match": site.strip('"')}))
    assert response.status_code == 400
    assert "If-None-Match must carry the ETag in double quotes" in detail(response)
    assert client.get("/api/v1/sites/S1", headers=auth("viewer", **{"If-None-Match": site})).status_code == 304


def test_tag_lists_as_rfc_9110_writes_them(client, auth, site):
    """Empty list elements are allowed (RFC 9110 §5.6.1); `*` stands alone in If-None-Match."""
    listed = client.get("/api/v1/sites/S1", headers=auth("viewer", **{"If-None-Match": f'"x", ,{site},'}))
    assert listed.status_code == 304
    empty = client.get("/api/v1/sites/S1", headers=auth("viewer", **{"If-None-Match": ""}))
    assert empty.status_code == 200
    star = client.get("/api/v1/sites/S1", headers=auth("viewer", **{"If-None-Match": f"{site}, *"}))
    assert star.status_code == 400 and "stands alone" in detail(star)
    run_together = client.get("/api/v1/sites/S1", headers=auth("viewer", **{"If-None-Match": f'{site} "x"'}))
    assert run_together.status_code == 400


def test_a_quoted_tag_that_moved_on_is_still_412(client, auth, site):
    response = client.patch(
        "/api/v1/sites/S1", json={"name": "x"}, headers=auth("admin", **{"If-Match": '"0000000000"'})
    )
    assert response.status_code == 412 and "changed since you read it" in detail(response)


# --- week, date-times, numbers ---------------------------------------------------------------------


@pytest.mark.parametrize("week", ["2026-50", "2026W50", "W50", "2026-w50"])
def test_bad_week_shows_the_expected_form(client, auth, truck, week):
    response = client.get(f"/api/v1/trucks/T1/trips?week={week}", headers=auth("viewer"))
    assert response.status_code == 422
    assert "2026-W50" in detail(response)


def test_a_week_that_does_not_exist_shows_the_form_too(client, auth, truck):
    # ISO 8601: a year has week 53 only when it has 53 Thursdays; 2025 (Wed 1 Jan – Wed 31 Dec) has not
    # (Python's date.fromisocalendar(2025, 53, 1) raises ValueError).
    response = client.get("/api/v1/trucks/T1/trips?week=2025-W53", headers=auth("viewer"))
    assert response.status_code == 422
    assert "2025 has no ISO week 53" in detail(response) and "2026-W50" in detail(response)


def test_datetime_without_offset_says_add_one(client, auth, site):
    response = client.post(
        "/api/v1/sites/S1/readings",
        json={"level": 100, "measured_at": "2026-12-01T06:30:00"},
        headers=auth("dispatcher"),
    )
    assert response.status_code == 422
    assert "add a UTC offset such as +00:00" in detail(response)
    assert "aware datetime" not in detail(response)


def test_limits_read_as_people_write_them(client, auth):
    body = {"demand_per_day": 0, "holding_cost": -1, "stop_cost": 1, "dispatch_cost": 1, "tank_capacity": 10}
    response = client.post("/api/v1/calculations/cycle", json=body | {"safe_fill": 2}, headers=auth("dispatcher"))
    assert response.status_code == 422
    messages = {e["pointer"]: e["detail"] for e in response.get_json()["errors"]}
    assert messages["#/demand_per_day"] == "Must be between 0.000001 and 1 000 000 000 000."
    assert messages["#/holding_cost"] == "Must be between 0 and 1 000 000 000 000."
    assert messages["#/safe_fill"] == "Must be between 0.01 and 1."
    assert "e-06" not in detail(response) and "1000000000000.0" not in detail(response)


@pytest.mark.parametrize(
    ("number", "text"),
    [(1e-6, "0.000001"), (0.01, "0.01"), (1.0, "1"), (1000, "1000"), (3660, "3660"), (1e12, "1 000 000 000 000"),
     (-90, "-90"), (-180.5, "-180.5"), (2147483647, "2 147 483 647")],
)
def test_readable(number, text):
    assert readable(number) == text


# --- CSV ------------------------------------------------------------------------------------------


def post_csv(client, auth, text: str):
    return client.post("/api/v1/sites/import", data=text.encode(), headers=auth("admin"), content_type="text/csv")


def test_semicolon_separated_csv_is_read(client, auth, truck, db_session):
    text = CSV_HEADER.replace(",", ";") + "\nS1;Site one;T1;100;0.001;30;10000\nS2;Site two;T1;90.5;0.002;25;8000\n"
    response = post_csv(client, auth, text)
    assert response.status_code == 200, response.get_json()
    assert response.get_json()["created"] == 2
    site = client.get("/api/v1/sites/S2", headers=auth("viewer")).get_json()
    assert site["name"] == "Site two" and site["demand_per_day"] == 90.5


def test_decimal_comma_is_named(client, auth, truck):
    text = CSV_HEADER.replace(",", ";") + "\nS1;Site one;T1;100;0,001;30;10000\n"
    response = post_csv(client, auth, text)
    assert response.status_code == 422
    (error,) = response.get_json()["errors"]
    assert error["pointer"] == "#/rows/2/holding_cost"
    assert "decimal point, not a comma" in error["detail"]


def test_an_unknown_separator_gets_a_hint(client, auth, truck):
    response = post_csv(client, auth, CSV_HEADER.replace(",", "|") + "\nS1|x|T1|1|0|0|10\n")
    assert response.status_code == 422
    assert "separate the cells with commas (or semicolons)" in detail(response)


def test_row_numbers_are_spreadsheet_rows(client, auth, truck):
    # Header row 1, S1 row 2, a blank line row 3 (a spreadsheet shows it), S2 on row 4.
    text = f"{CSV_HEADER}\nS1,Site one,T1,100,0.001,30,10000\n\nS2,Site two,T1,-5,0.001,30,10000\n"
    response = post_csv(client, auth, text)
    assert response.status_code == 422
    (error,) = response.get_json()["errors"]
    assert error["pointer"] == "#/rows/4/demand_per_day" and error["detail"].startswith("Row 4, demand_per_day")
    assert "4" in detail(response)


def test_one_unreadable_cell_does_not_hide_the_rows_other_errors(client, auth, truck):
    # holding_cost cannot be read; stop_cost is negative, the truck is unknown, the code is bad.
    text = f"{CSV_HEADER}\nbad code!,Site,NOPE,100,cheap,-3,10000\n"
    response = post_csv(client, auth, text)
    assert response.status_code == 422
    pointers = {e["pointer"] for e in response.get_json()["errors"]}
    assert pointers == {"#/rows/2/holding_cost", "#/rows/2/stop_cost", "#/rows/2/truck", "#/rows/2/code"}
