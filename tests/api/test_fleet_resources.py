"""Issue 16's first slice: depots and products, and the fleet fields of trucks and sites.

Depots: POST/GET/PATCH (If-Match) under /api/v1/depots; products: GET/POST under /api/v1/products;
trucks gain depot, cost_per_km, compartments, products; sites gain product. Every reference names a
stored row (422 otherwise) and a truck's compartments sum to its capacity (W = Σ C_j, docs/fleet.md).
Coordinates and products are our own invented scenario.
"""

from __future__ import annotations

import pytest
from sqlalchemy import func, select

from service.persistence.models import Depot, Product, Site, Truck
from tests.api.fleet_bodies import DIESEL, LPG, PRODUCTS, SITE, SITES, TRUCK, TRUCKS

DEPOTS = "/api/v1/depots"
DEPOT = {"code": "D-N", "name": "North depot", "latitude": 52.37, "longitude": 4.89}


def post(client, auth, path, body, status=201, role="admin"):
    response = client.post(path, json=body, headers=auth(role))
    assert response.status_code == status, response.get_json()
    return response


def problem(response, status: int, pointer: str | None = None) -> dict:
    assert response.status_code == status, response.get_json()
    assert response.mimetype == "application/problem+json"
    body = response.get_json()
    assert body["status"] == status
    if pointer is not None:
        assert pointer in [e["pointer"] for e in body["errors"]], body
    return body


def count(db_session, model) -> int:
    return db_session.scalar(select(func.count()).select_from(model))


# --- depots -----------------------------------------------------------------------------------


def test_depot_create_read_list_and_location(client, auth, db_session):
    created = post(client, auth, DEPOTS, DEPOT)
    assert created.headers["Location"].endswith("/api/v1/depots/D-N")
    body = created.get_json()
    assert {k: body[k] for k in DEPOT} == DEPOT and body["version"] == 1
    stored = db_session.scalars(select(Depot)).one()
    assert (stored.latitude, stored.longitude) == (52.37, 4.89)
    read = client.get(created.headers["Location"], headers=auth("viewer"))
    assert read.status_code == 200 and read.headers["ETag"] == created.headers["ETag"]
    assert (
        client.get(
            created.headers["Location"], headers=auth("viewer", **{"If-None-Match": read.headers["ETag"]})
        ).status_code
        == 304
    )
    post(client, auth, DEPOTS, DEPOT | {"code": "D-A", "name": "A depot"})
    listed = client.get(f"{DEPOTS}?limit=1", headers=auth("viewer"))
    assert [d["code"] for d in listed.get_json()["items"]] == ["D-A"]
    assert "after=D-A" in listed.headers["Link"]
    rest = client.get(f"{DEPOTS}?limit=1&after=D-A", headers=auth("viewer"))
    assert [d["code"] for d in rest.get_json()["items"]] == ["D-N"] and "Link" not in rest.headers


def test_depot_duplicate_is_409_unknown_is_404(client, auth, db_session):
    post(client, auth, DEPOTS, DEPOT)
    problem(client.post(DEPOTS, json=DEPOT | {"name": "Other"}, headers=auth("admin")), 409)
    assert db_session.scalars(select(Depot.name)).one() == "North depot"
    problem(client.get(f"{DEPOTS}/NOPE", headers=auth("viewer")), 404)
    problem(client.patch(f"{DEPOTS}/NOPE", json={"name": "x"}, headers=auth("admin", **{"If-Match": '"x"'})), 404)


@pytest.mark.parametrize(
    ("field", "value"),
    [
        ("latitude", 90.5),
        ("latitude", -91),
        ("longitude", 181),
        ("latitude", "52"),
        ("longitude", None),
        ("latitude", True),
        ("code", "a b"),
        ("code", ".."),
        ("name", ""),
        ("version", 3),
        ("colour", "red"),
    ],
)
def test_depot_bad_input_is_422_naming_the_field_and_writes_nothing(client, auth, db_session, field, value):
    problem(client.post(DEPOTS, json=DEPOT | {field: value}, headers=auth("admin")), 422, f"#/{field}")
    assert count(db_session, Depot) == 0


@pytest.mark.parametrize("field", ["code", "name", "latitude", "longitude"])
def test_depot_missing_field_is_422(client, auth, db_session, field):
    body = {k: v for k, v in DEPOT.items() if k != field}
    problem(client.post(DEPOTS, json=body, headers=auth("admin")), 422, f"#/{field}")
    assert count(db_session, Depot) == 0


def test_depot_patch_needs_if_match_and_bumps_the_version(client, auth, db_session):
    etag = post(client, auth, DEPOTS, DEPOT).headers["ETag"]
    url = f"{DEPOTS}/D-N"
    problem(client.patch(url, json={"latitude": 52.0}, headers=auth("admin")), 428)
    problem(client.patch(url, json={"latitude": 52.0}, headers=auth("admin", **{"If-Match": '"stale"'})), 412)
    problem(client.patch(url, json={"latitude": 95.0}, headers=auth("admin", **{"If-Match": etag})), 422, "#/latitude")
    problem(client.patch(url, json={"code": "D-X"}, headers=auth("admin", **{"If-Match": etag})), 422, "#/code")
    changed = client.patch(url, json={"latitude": 52.0, "name": "North"}, headers=auth("admin", **{"If-Match": etag}))
    assert changed.status_code == 200, changed.get_json()
    body = changed.get_json()
    assert (body["latitude"], body["longitude"], body["name"], body["version"]) == (52.0, 4.89, "North", 2)
    assert changed.headers["ETag"] != etag
    problem(client.patch(url, json={"name": "lost"}, headers=auth("admin", **{"If-Match": etag})), 412)
    db_session.expire_all()
    assert db_session.scalars(select(Depot.name)).one() == "North"


# --- products ---------------------------------------------------------------------------------


def test_product_create_read_list(client, auth, db_session):
    created = post(client, auth, PRODUCTS, DIESEL)
    assert created.headers["Location"].endswith("/api/v1/products/DSL")
    assert {k: created.get_json()[k] for k in DIESEL} == DIESEL
    post(client, auth, PRODUCTS, LPG)
    read = client.get(created.headers["Location"], headers=auth("viewer"))
    assert read.status_code == 200 and read.get_json()["safe_fill"] == 0.95
    listed = client.get(PRODUCTS, headers=auth("viewer")).get_json()["items"]
    assert [(p["code"], p["safe_fill"]) for p in listed] == [("DSL", 0.95), ("LPG", 0.8)]
    assert count(db_session, Product) == 2


def test_product_duplicate_is_409_unknown_is_404(client, auth, db_session):
    post(client, auth, PRODUCTS, DIESEL)
    problem(client.post(PRODUCTS, json=DIESEL | {"safe_fill": 0.9}, headers=auth("admin")), 409)
    assert db_session.scalars(select(Product.safe_fill)).one() == 0.95
    problem(client.get(f"{PRODUCTS}/NOPE", headers=auth("viewer")), 404)


@pytest.mark.parametrize(
    ("field", "value"),
    [("safe_fill", 0), ("safe_fill", 1.01), ("safe_fill", "0.9"), ("safe_fill", None), ("code", "x/y"), ("id", 1)],
)
def test_product_bad_input_is_422(client, auth, db_session, field, value):
    problem(client.post(PRODUCTS, json=DIESEL | {field: value}, headers=auth("admin")), 422, f"#/{field}")
    assert count(db_session, Product) == 0


@pytest.mark.parametrize(
    ("method", "path", "body"),
    [("post", DEPOTS, DEPOT), ("post", PRODUCTS, DIESEL), ("patch", f"{DEPOTS}/D-N", {"name": "x"})],
)
@pytest.mark.parametrize("role", ["viewer", "dispatcher"])
def test_writes_are_admin_only(client, auth, db_session, method, path, body, role):
    problem(getattr(client, method)(path, json=body, headers=auth(role, **{"If-Match": '"x"'})), 403)
    assert count(db_session, Depot) == 0 and count(db_session, Product) == 0


@pytest.mark.parametrize("path", [DEPOTS, PRODUCTS, f"{DEPOTS}/D-N", f"{PRODUCTS}/DSL"])
def test_reads_need_a_token(client, path):
    problem(client.get(path), 401)


# --- fleet fields of trucks and sites ---------------------------------------------------------


@pytest.fixture
def fleet(client, auth):
    post(client, auth, DEPOTS, DEPOT)
    post(client, auth, PRODUCTS, DIESEL)
    post(client, auth, PRODUCTS, LPG)


def test_truck_fleet_fields_default_and_round_trip(client, auth, fleet, db_session):
    plain = post(client, auth, TRUCKS, TRUCK).get_json()
    assert (plain["depot"], plain["cost_per_km"], plain["compartments"], plain["products"]) == (None, 0.0, None, None)
    body = TRUCK | {
        "code": "T2",
        "depot": "D-N",
        "cost_per_km": 1.25,
        "compartments": [8000.0, 6000.0, 4000.0],
        "products": ["DSL", "LPG"],
    }
    created = post(client, auth, TRUCKS, body).get_json()
    assert {k: created[k] for k in body} == body
    stored = db_session.scalars(select(Truck).where(Truck.code == "T2")).one()
    assert (stored.depot, stored.compartments, stored.products) == ("D-N", [8000.0, 6000.0, 4000.0], ["DSL", "LPG"])


@pytest.mark.parametrize(
    ("extra", "pointer"),
    [
        ({"depot": "NOWHERE"}, "#/depot"),
        ({"products": ["DSL", "HFO"]}, "#/products/1"),
        ({"products": ["DSL", "DSL"]}, "#/products"),
        ({"products": []}, "#/products"),
        ({"compartments": [8000.0, 6000.0]}, "#/compartments"),  # sums to 14 000, not 18 000
        ({"compartments": []}, "#/compartments"),
        ({"compartments": [18000.0, 0.0]}, "#/compartments/1"),
        ({"compartments": [1500.0] * 13}, "#/compartments"),  # more than 12
        ({"cost_per_km": -0.5}, "#/cost_per_km"),
    ],
)
def test_truck_bad_fleet_fields_are_422_and_write_nothing(client, auth, fleet, db_session, extra, pointer):
    problem(client.post(TRUCKS, json=TRUCK | extra, headers=auth("admin")), 422, pointer)
    assert count(db_session, Truck) == 0


def test_truck_patch_checks_depot_products_and_compartments_against_the_stored_capacity(client, auth, fleet):
    etag = post(client, auth, TRUCKS, TRUCK).headers["ETag"]
    url = f"{TRUCKS}/T1"

    def patch(body):
        return client.patch(url, json=body, headers=auth("admin", **{"If-Match": etag}))

    problem(patch({"depot": "NOWHERE"}), 422, "#/depot")
    problem(patch({"products": ["XX"]}), 422, "#/products/0")
    problem(patch({"compartments": [9000.0, 8000.0]}), 422, "#/compartments")  # stored capacity 18 000
    changed = patch({"depot": "D-N", "compartments": [9000.0, 9000.0], "cost_per_km": 2.0})
    assert changed.status_code == 200, changed.get_json()
    etag = changed.headers["ETag"]
    assert changed.get_json()["version"] == 2
    problem(patch({"capacity": 20000.0}), 422, "#/compartments")  # the stored compartments sum to 18 000
    both = patch({"capacity": 20000.0, "compartments": [10000.0, 10000.0]})
    assert both.status_code == 200, both.get_json()
    etag = both.headers["ETag"]
    cleared = patch({"depot": None, "compartments": None, "products": None})
    assert cleared.status_code == 200
    assert (cleared.get_json()["depot"], cleared.get_json()["compartments"]) == (None, None)


def test_site_product_is_stored_and_must_be_known(client, auth, fleet, db_session):
    post(client, auth, TRUCKS, TRUCK)
    problem(client.post(SITES, json=SITE | {"product": "HFO"}, headers=auth("admin")), 422, "#/product")
    assert count(db_session, Site) == 0
    plain = post(client, auth, SITES, SITE)
    assert plain.get_json()["product"] is None
    etag = plain.headers["ETag"]
    url = f"{SITES}/S1"
    problem(client.patch(url, json={"product": "HFO"}, headers=auth("admin", **{"If-Match": etag})), 422, "#/product")
    changed = client.patch(url, json={"product": "LPG"}, headers=auth("admin", **{"If-Match": etag}))
    assert changed.status_code == 200 and changed.get_json()["product"] == "LPG"
    assert client.get(url, headers=auth("viewer")).get_json()["product"] == "LPG"
    created = post(client, auth, SITES, SITE | {"code": "S2", "product": "DSL"}).get_json()
    assert created["product"] == "DSL"
    db_session.expire_all()
    assert db_session.scalars(select(Site.product).order_by(Site.code)).all() == ["LPG", "DSL"]


def test_a_csv_reimport_keeps_the_sites_product(client, auth, fleet, db_session):
    """A CSV without the product column (older files) leaves a stored site's product alone."""
    post(client, auth, TRUCKS, TRUCK)
    post(client, auth, SITES, SITE | {"product": "DSL"})
    csv = "code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity\nS1,Site one,T1,350,0.001,30,10000\n"
    response = client.post(f"{SITES}/import", data=csv, headers=auth("admin"), content_type="text/csv")
    assert response.status_code == 200 and response.get_json()["updated"] == 1, response.get_json()
    db_session.expire_all()
    site = db_session.scalars(select(Site)).one()
    assert (site.demand_per_day, site.product) == (350.0, "DSL")
