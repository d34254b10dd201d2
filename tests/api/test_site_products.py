"""Sites' products (issue 16): a new site without safe_fill gets its product's default safe fill, an explicit
safe_fill is kept, a PATCH of the product alone keeps the stored safe_fill; the sites CSV carries an
optional `product` column (round trip, unknown code named by row, files without it still import)."""

from __future__ import annotations

import pytest
from sqlalchemy import select

from service.persistence.models import Site
from tests.api.fleet_bodies import DIESEL, LPG, PRODUCTS, SITE, SITES, TRUCK, TRUCKS

HEADER = "code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity"


@pytest.fixture
def fleet(client, auth):
    for path, body in ((PRODUCTS, DIESEL), (PRODUCTS, LPG), (TRUCKS, TRUCK)):
        assert client.post(path, json=body, headers=auth("admin")).status_code == 201


def create(client, auth, body):
    response = client.post(SITES, json=body, headers=auth("admin"))
    assert response.status_code == 201, response.get_json()
    return response


def test_a_new_site_gets_its_products_safe_fill(client, auth, fleet):
    assert create(client, auth, SITE | {"product": "LPG"}).get_json()["safe_fill"] == 0.8
    assert create(client, auth, SITE | {"code": "S2", "product": "DSL"}).get_json()["safe_fill"] == 0.95
    assert create(client, auth, SITE | {"code": "S3"}).get_json()["safe_fill"] == 0.9  # no product
    kept = create(client, auth, SITE | {"code": "S4", "product": "LPG", "safe_fill": 0.85}).get_json()
    assert kept["safe_fill"] == 0.85


def test_safety_stock_is_checked_against_the_products_safe_fill(client, auth, fleet):
    # 0.8 × 10 000 = 8 000: a safety stock of 8 500 would fit under 0.9 but not under LPG's 0.8.
    response = client.post(SITES, json=SITE | {"product": "LPG", "safety_stock": 8500.0}, headers=auth("admin"))
    assert response.status_code == 422
    assert [e["pointer"] for e in response.get_json()["errors"]] == ["#/safety_stock"]


def test_a_product_change_keeps_the_stored_safe_fill(client, auth, fleet):
    etag = create(client, auth, SITE | {"product": "DSL"}).headers["ETag"]
    changed = client.patch(f"{SITES}/S1", json={"product": "LPG"}, headers=auth("admin", **{"If-Match": etag}))
    assert changed.status_code == 200
    assert (changed.get_json()["product"], changed.get_json()["safe_fill"]) == ("LPG", 0.95)


def test_csv_product_column_round_trips(client, auth, fleet, db_session):
    create(client, auth, SITE | {"product": "LPG", "safe_fill": 0.82})
    create(client, auth, SITE | {"code": "S2"})
    exported = client.get(f"{SITES}/export", headers=auth("viewer"))
    assert exported.status_code == 200
    text = exported.get_data(as_text=True)
    assert text.splitlines()[0].endswith(",product")
    db_session.execute(Site.__table__.update().values(product=None, safe_fill=0.5))
    db_session.commit()
    response = client.post(f"{SITES}/import", data=text, headers=auth("admin"), content_type="text/csv")
    assert response.status_code == 200, response.get_json()
    db_session.expire_all()
    rows = db_session.execute(select(Site.code, Site.product, Site.safe_fill).order_by(Site.code)).all()
    assert [tuple(r) for r in rows] == [("S1", "LPG", 0.82), ("S2", None, 0.9)]


def test_csv_rows_without_safe_fill_get_the_products_default(client, auth, fleet, db_session):
    csv = f"{HEADER},product\nA1,A,T1,300,0.001,30,10000,LPG\nA2,B,T1,300,0.001,30,10000,\n"
    response = client.post(f"{SITES}/import", data=csv, headers=auth("admin"), content_type="text/csv")
    assert response.status_code == 200, response.get_json()
    rows = db_session.execute(select(Site.code, Site.product, Site.safe_fill).order_by(Site.code)).all()
    assert [tuple(r) for r in rows] == [("A1", "LPG", 0.8), ("A2", None, 0.9)]


def test_csv_unknown_product_names_the_row_and_writes_nothing(client, auth, fleet, db_session):
    csv = f"{HEADER},product\nA1,A,T1,300,0.001,30,10000,DSL\nA2,B,T1,300,0.001,30,10000,HFO\n"
    response = client.post(f"{SITES}/import", data=csv, headers=auth("admin"), content_type="text/csv")
    assert response.status_code == 422
    assert [e["pointer"] for e in response.get_json()["errors"]] == ["#/rows/3/product"]
    assert db_session.scalars(select(Site)).all() == []


def test_an_old_csv_without_the_column_keeps_products(client, auth, fleet, db_session):
    create(client, auth, SITE | {"product": "LPG", "safe_fill": 0.83})
    csv = f"{HEADER}\nS1,Site one,T1,350,0.001,30,10000\nS9,New,T1,300,0.001,30,10000\n"
    response = client.post(f"{SITES}/import", data=csv, headers=auth("admin"), content_type="text/csv")
    assert response.status_code == 200, response.get_json()
    db_session.expire_all()
    rows = db_session.execute(select(Site.code, Site.product, Site.safe_fill).order_by(Site.code)).all()
    # The row gives no safe_fill: the stored product's default, as for a new site of that product.
    assert [tuple(r) for r in rows] == [("S1", "LPG", 0.8), ("S9", None, 0.9)]
