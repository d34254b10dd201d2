"""CSV import (all or nothing, dry run, units) and export (formula cells defused, round trip)."""

from __future__ import annotations

import csv
import io

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from service.persistence.models import Site
from service.request_db import dispose

IMPORT = "/api/v1/sites/import"
EXPORT = "/api/v1/sites/export"
HEADER = "code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity,safe_fill,safety_stock,active,latitude,longitude"
#: 1 US gallon = 3.785411784 L exactly (NIST Handbook 44, Appendix C, "General Tables of Units of
#: Measurement": 1 gallon = 231 cubic inches = 3.785 411 784 litres).
LITRES_PER_US_GALLON = 3.785411784


@pytest.fixture
def trucks(client, auth):
    for code in ("T1", "T2"):
        body = {"code": code, "name": f"Truck {code}", "dispatch_cost": 150.0, "capacity": 18000.0}
        assert client.post("/api/v1/trucks", json=body, headers=auth("admin")).status_code == 201


def rows(n: int, *, truck: str = "T1", demand: float = 100.0) -> list[str]:
    return [
        f"S{i:03d},Site {i},{truck},{demand + i},0.001,30,{10000 + i},0.9,500,true,51.5,-3.25" for i in range(1, n + 1)
    ]


def post_csv(client, auth, lines, query="", role="admin", content_type="text/csv"):
    body = "\n".join(lines) + "\n"
    return client.post(IMPORT + query, data=body.encode("utf-8"), headers=auth(role), content_type=content_type)


def count(db_session) -> int:
    return db_session.scalar(select(func.count()).select_from(Site))


def test_fifty_rows_with_one_bad_row_write_nothing_and_name_row_and_column(client, auth, trucks, db_session):
    lines = [HEADER, *rows(50)]
    lines[37] = lines[37].replace(",137.0,", ",-5,")  # data row 37: row 38 of a spreadsheet (header = row 1)
    assert ",-5," in lines[37]
    response = post_csv(client, auth, lines)
    assert response.status_code == 422, response.get_json()
    assert response.mimetype == "application/problem+json"
    body = response.get_json()
    assert [e["pointer"] for e in body["errors"]] == ["#/rows/38/demand_per_day"]
    assert "Row 38" in body["errors"][0]["detail"] and "38" in body["detail"]
    assert count(db_session) == 0


def test_every_bad_row_and_column_is_named(client, auth, trucks, db_session):
    lines = [HEADER, *rows(10)]
    lines[2] = lines[2].replace("Site 2,T1", "Site 2,NOPE")
    lines[5] = lines[5].replace(",0.9,500,", ",0.9,99999,")  # safety stock above safe fill
    lines[7] = lines[7].replace(",0.001,", ",cheap,").replace(",true,", ",maybe,")
    lines[9] = lines[9].replace("S009", "S001")  # duplicate code in the file
    lines[10] = lines[10].replace(",51.5,", ",NaN,")
    response = post_csv(client, auth, lines)
    assert response.status_code == 422
    pointers = {e["pointer"] for e in response.get_json()["errors"]}
    assert pointers == {
        "#/rows/3/truck",
        "#/rows/6/safety_stock",
        "#/rows/8/holding_cost",
        "#/rows/8/active",
        "#/rows/10/code",
        "#/rows/11/latitude",
    }
    assert count(db_session) == 0


def test_dry_run_writes_nothing_and_reports_counts(client, auth, trucks, db_session):
    assert post_csv(client, auth, [HEADER, *rows(3)]).status_code == 200
    lines = [HEADER, *rows(5)]
    lines[1] = lines[1].replace("Site 1,", "Site one renamed,")
    response = post_csv(client, auth, lines, "?dry_run=true")
    assert response.status_code == 200, response.get_json()
    assert response.get_json() == {"dry_run": True, "created": 2, "updated": 1, "rows": 5}
    assert count(db_session) == 3
    assert db_session.scalars(select(Site.name).where(Site.code == "S001")).one() == "Site 1"
    bad = post_csv(client, auth, [HEADER, "X,,T1,1,0,0,1,0.9,0,true,,"], "?dry_run=true")
    assert bad.status_code == 422 and bad.get_json()["errors"][0]["pointer"] == "#/rows/2/name"


def test_import_creates_then_updates_with_version_bump(client, auth, trucks, db_session):
    first = post_csv(client, auth, [HEADER, *rows(4)])
    assert first.get_json() == {"dry_run": False, "created": 4, "updated": 0, "rows": 4}
    etag_before = client.get("/api/v1/sites/S002", headers=auth("viewer")).headers["ETag"]
    lines = [HEADER, *rows(5)]
    lines[2] = lines[2].replace(",T1,", ",T2,").replace(",30,", ",45,")
    second = post_csv(client, auth, lines)
    assert second.get_json() == {"dry_run": False, "created": 1, "updated": 1, "rows": 5}
    site = client.get("/api/v1/sites/S002", headers=auth("viewer"))
    assert site.get_json()["version"] == 2 and site.get_json()["truck"] == "T2" and site.get_json()["stop_cost"] == 45
    assert site.headers["ETag"] != etag_before
    versions = dict(db_session.execute(select(Site.code, Site.version)).all())
    assert versions == {"S001": 1, "S002": 2, "S003": 1, "S004": 1, "S005": 1}


def test_unit_column_converts_gallons_and_cubic_metres_exactly(client, auth, trucks, db_session):
    header = "code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity,safety_stock,unit"
    lines = [
        header,
        "G,Tote,T1,10,0.01,20,250,25,gal",
        "M,Depot,T1,2.5,1.2,60,60,8,m3",
        "L,Plain,T1,100,0.001,30,5000,0,L",
        "D,Default,T1,100,0.001,30,5000,0,",
    ]
    assert post_csv(client, auth, lines).status_code == 200
    got = {s.code: s for s in db_session.scalars(select(Site))}
    assert got["G"].demand_per_day == pytest.approx(10 * LITRES_PER_US_GALLON, rel=1e-15)
    assert got["G"].tank_capacity == pytest.approx(250 * LITRES_PER_US_GALLON, rel=1e-15)
    assert got["G"].safety_stock == pytest.approx(25 * LITRES_PER_US_GALLON, rel=1e-15)
    assert got["G"].holding_cost == pytest.approx(0.01 / LITRES_PER_US_GALLON, rel=1e-15)
    assert got["G"].stop_cost == 20  # money per delivery is not a volume
    assert (got["M"].demand_per_day, got["M"].tank_capacity, got["M"].safety_stock) == (2500, 60000, 8000)
    assert got["M"].holding_cost == pytest.approx(0.0012, rel=1e-15)
    assert (got["L"].tank_capacity, got["D"].tank_capacity) == (5000, 5000)


def test_unit_conversion_into_a_gallon_service(database_url, tokens, db_session):
    from service import create_app

    app = create_app({"DATABASE_URL": database_url, "ULLAGE_QUANTITY_UNIT": "gal"})
    try:
        client = app.test_client()
        headers = {"Authorization": f"Bearer {tokens['admin']}"}
        truck = {"code": "T1", "name": "t", "dispatch_cost": 1, "capacity": 5000}
        assert client.post("/api/v1/trucks", json=truck, headers=headers).status_code == 201
        body = (
            "code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity,unit\n"
            f"A,a,T1,{LITRES_PER_US_GALLON * 10},0.5,1,{LITRES_PER_US_GALLON * 100},L\n"
        )
        assert client.post(IMPORT, data=body, headers=headers, content_type="text/csv").status_code == 200
        bad = client.post(IMPORT, data=body.replace(",L\n", ",barrel\n"), headers=headers, content_type="text/csv")
        assert bad.status_code == 422 and bad.get_json()["errors"][0]["pointer"] == "#/rows/2/unit"
    finally:
        dispose(app)
    site = db_session.scalars(select(Site)).one()
    assert site.demand_per_day == pytest.approx(10, rel=1e-15)
    assert site.tank_capacity == pytest.approx(100, rel=1e-15)
    assert site.holding_cost == pytest.approx(0.5 * LITRES_PER_US_GALLON, rel=1e-15)


def test_header_problems_are_named(client, auth, trucks, db_session):
    unknown = post_csv(client, auth, [HEADER + ",demand_gal_per_day", rows(1)[0] + ",5"])
    assert unknown.status_code == 422
    assert unknown.get_json()["errors"] == [{"pointer": "#/header/demand_gal_per_day", "detail": "Unknown column."}]
    missing = post_csv(client, auth, ["code,name,truck", "A,a,T1"])
    assert missing.status_code == 422
    assert {e["pointer"] for e in missing.get_json()["errors"]} == {
        "#/header/demand_per_day",
        "#/header/holding_cost",
        "#/header/stop_cost",
        "#/header/tank_capacity",
    }
    assert post_csv(client, auth, [HEADER]).status_code == 422  # no rows
    extra_cell = post_csv(client, auth, [HEADER, rows(1)[0] + ",surprise"])
    assert extra_cell.get_json()["errors"][0]["pointer"] == "#/rows/2"
    assert count(db_session) == 0


def test_non_utf8_and_bom(client, auth, trucks, db_session):
    latin1 = (HEADER + "\n" + rows(1)[0].replace("Site 1", "Caf\xe9") + "\n").encode("latin-1")
    response = client.post(IMPORT, data=latin1, headers=auth("admin"), content_type="text/csv")
    assert response.status_code == 422 and "UTF-8" in response.get_json()["detail"]
    with_bom = ("\ufeff" + HEADER + "\n" + rows(1)[0].replace("Site 1", "Caf\xe9") + "\n").encode("utf-8")
    assert client.post(IMPORT, data=with_bom, headers=auth("admin"), content_type="text/csv").status_code == 200
    assert db_session.scalars(select(Site.name)).one() == "Caf\xe9"


def test_import_is_admin_only_and_needs_text_csv(client, auth, trucks):
    assert post_csv(client, auth, [HEADER, *rows(1)], role="dispatcher").status_code == 403
    assert post_csv(client, auth, [HEADER, *rows(1)], content_type="application/octet-stream").status_code == 415
    assert post_csv(client, auth, [HEADER, *rows(1)], query="?dry_run=maybe").status_code == 422


def test_export_defuses_formula_cells_and_round_trips(client, auth, trucks, db_session):
    names = {"F1": '=HYPERLINK("http://x","y")', "F2": "+SUM(A1)", "F3": "-2+3", "F4": "@cmd", "F5": "plain"}
    for code, name in names.items():
        body = site_body(code, name) | {"longitude": -3.25, "latitude": 51.1}
        assert client.post("/api/v1/sites", json=body, headers=auth("admin")).status_code == 201
    body = {
        "code": "-dash",
        "name": "code starting with a dash",
        "truck": "T1",
        "demand_per_day": 1,
        "holding_cost": 0,
        "stop_cost": 0,
        "tank_capacity": 10,
    }
    assert client.post("/api/v1/sites", json=body, headers=auth("admin")).status_code == 201

    response = client.get(EXPORT, headers=auth("viewer"))
    assert response.status_code == 200
    assert response.mimetype == "text/csv"
    assert "attachment" in response.headers["Content-Disposition"]
    exported = list(csv.DictReader(io.StringIO(response.get_data(as_text=True))))
    by_code = {row["code"]: row for row in exported}
    # OWASP "CSV Injection": prefix cells starting with = + - @ (tab, CR) with a single quote.
    for code in ("F1", "F2", "F3", "F4"):
        assert by_code[code]["name"] == "'" + names[code]
    assert by_code["F5"]["name"] == "plain"
    assert "'-dash" in by_code
    assert by_code["F1"]["longitude"] == "-3.25"  # numbers are never defused
    assert all(not (v or "").startswith(("=", "+", "@")) for row in exported for v in row.values())

    before = {
        s.code: (s.name, s.demand_per_day, s.holding_cost, s.longitude, s.version)
        for s in db_session.scalars(select(Site))
    }
    back = client.post(IMPORT, data=response.get_data(), headers=auth("admin"), content_type="text/csv")
    assert back.status_code == 200, back.get_json()
    assert back.get_json() == {"dry_run": False, "created": 0, "updated": 0, "rows": 6}
    db_session.expire_all()
    after = {
        s.code: (s.name, s.demand_per_day, s.holding_cost, s.longitude, s.version)
        for s in db_session.scalars(select(Site))
    }
    assert after == before


def site_body(code: str, name: str) -> dict:
    return {
        "code": code,
        "name": name,
        "truck": "T1",
        "demand_per_day": 12.5,
        "holding_cost": 0.0015,
        "stop_cost": 30,
        "tank_capacity": 1000,
    }


@pytest.mark.parametrize("name", ["'=1+2", "''=x", "'+", "'-3", "'@cmd", "'\tx", "'\r", "'t Hoekje", "'", " spaced "])
def test_names_starting_with_a_quote_survive_export_and_import(client, auth, trucks, db_session, name):
    assert client.post("/api/v1/sites", json=site_body("Q", name), headers=auth("admin")).status_code == 201
    exported = client.get(EXPORT, headers=auth("viewer")).get_data()
    cell = next(csv.DictReader(io.StringIO(exported.decode())))["name"]
    assert not cell.lstrip("'").startswith(("=", "+", "-", "@", "\t", "\r")) or cell.startswith("'")  # still defused
    back = client.post(IMPORT, data=exported, headers=auth("admin"), content_type="text/csv")
    assert back.status_code == 200, back.get_json()
    assert back.get_json()["updated"] == 0
    db_session.expire_all()
    assert db_session.scalars(select(Site.name)).one() == name


#: Any printable name (letters, marks, digits, punctuation, symbols, spaces), often opened by
#: quotes and a formula character, the cases the export's defusing has to undo exactly.
NAMES = (
    st.tuples(
        st.sampled_from(["", "'", "''", "'''"]),
        st.sampled_from(["", "=", "+", "-", "@", "\t", "\r"]),
        st.text(st.characters(categories=("L", "M", "N", "P", "S", "Zs")), max_size=60),
    )
    .map("".join)
    .filter(lambda name: 1 <= len(name) <= 200)
)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(name=NAMES)
def test_every_name_survives_export_then_import(client, auth, trucks, db_session, name):
    """Property: export → import is the identity on names (and changes nothing else)."""
    headers = auth("admin")
    current = client.get("/api/v1/sites/R", headers=headers)
    if current.status_code == 404:
        assert client.post("/api/v1/sites", json=site_body("R", name), headers=headers).status_code == 201
    else:
        changed = client.patch(
            "/api/v1/sites/R", json={"name": name}, headers={**headers, "If-Match": current.headers["ETag"]}
        )
        assert changed.status_code == 200, changed.get_json()
    exported = client.get(EXPORT, headers=headers).get_data()
    back = client.post(IMPORT, data=exported, headers=headers, content_type="text/csv")
    assert back.status_code == 200, back.get_json()
    assert back.get_json()["updated"] == 0
    assert client.get("/api/v1/sites/R", headers=headers).get_json()["name"] == name


@pytest.mark.parametrize(
    "cell",
    [
        "1_000",
        "\u0661\u0660\u0660\u0660",
        "\uff11\uff10\uff10\uff10",
        "1\u00a0000",
        "0x10",
        "1e",
        "e3",
        "+-1",
        "inf",
        "nan",
        "--1",
        "1.2.3",
    ],
)
def test_csv_numbers_must_be_plain_ascii_decimals(client, auth, trucks, db_session, cell):
    """``float()`` reads ``1_000`` and digits of every script (``١٠٠٠`` Arabic-Indic, ``１０００``
    fullwidth); a CSV cell must be plain digits 0-9."""
    line = f"S1,Site,T1,{cell},0.001,30,10000,0.9,0,true,,"
    response = post_csv(client, auth, [HEADER, line])
    assert response.status_code == 422, response.get_json()
    errors = response.get_json()["errors"]
    assert [e["pointer"] for e in errors] == ["#/rows/2/demand_per_day"]
    assert "Row 2, demand_per_day" in errors[0]["detail"] and "plain number" in errors[0]["detail"]
    assert count(db_session) == 0


@pytest.mark.parametrize(
    ("cell", "value"),
    [("1000", 1000), ("+1000", 1000), ("12.", 12), (".5", 0.5), ("2.5E3", 2500), ("7e-1", 0.7), (" 42 ", 42)],
)
def test_csv_plain_decimal_forms_are_read(client, auth, trucks, db_session, cell, value):
    response = post_csv(client, auth, [HEADER, f"S1,Site,T1,{cell},0.001,30,10000,0.9,0,true,,-3.25"])
    assert response.status_code == 200, response.get_json()
    stored = db_session.scalars(select(Site)).one()
    assert (stored.demand_per_day, stored.longitude) == (value, -3.25)
