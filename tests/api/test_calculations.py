"""Stateless calculations: POST /api/v1/calculations/cycle and /joint (issue 4 §1)."""

from __future__ import annotations

import json

import pytest
from contract import JOINT_FIELDS, JOINT_SITE_FIELDS, UNCONSTRAINED_CALENDAR
from sqlalchemy import func, select

from service.persistence.models import IdempotencyRecord, Plan, PlanSite, Reading, Site, Truck

CYCLE = "/api/v1/calculations/cycle"
JOINT = "/api/v1/calculations/joint"

CYCLE_FIELDS = {"cycle_days_continuous", "cost_per_day_continuous", "cycle_days", "quantity", "cost_per_day", "binding"}
TABLES = (Truck, Site, Plan, PlanSite, Reading, IdempotencyRecord)


def c2(**extra):
    """Check case C2 (derived from the EOQ cost ``(K + k)/T + h d T/2``, Harris 1913, with a tank cap;
    docs/planning.md §2): d = 1200 L/day, h = 0.002 $/L/day, K + k = 350, safe cap 20 000 L."""
    return {
        "demand_per_day": 1200,
        "holding_cost": 0.002,
        "stop_cost": 50,
        "dispatch_cost": 300,
        "tank_capacity": 20000,
        "safe_fill": 1.0,
        "safety_stock": 0,
    } | extra


def joint_site(code: str, **extra):
    return {
        "code": code,
        "demand_per_day": 500.0,
        "holding_cost": 0.002,
        "stop_cost": 25.0,
        "tank_capacity": 20000.0,
        "safe_fill": 0.9,
        "safety_stock": 1000.0,
    } | extra


def joint_body(n: int = 4, **extra):
    sites = [joint_site(f"S{i}", demand_per_day=200.0 + 150 * i) for i in range(n)]
    return {"dispatch_cost": 150.0, "truck_capacity": 30000.0, "max_stops": 6, "sites": sites} | extra


def counts(db_session) -> dict[str, int]:
    return {m.__tablename__: db_session.scalar(select(func.count()).select_from(m)) for m in TABLES}


# --- cycle ---------------------------------------------------------------------------------


def test_cycle_c2_check_value_tank_binding(client, auth):
    # C2, derived from the capped EOQ cost (Harris 1913; docs/planning.md §2), recomputed by hand:
    # capped continuous cost 41.000000 $/day at U = 16.666667 d; whole days T = 16, cost 41.075.
    response = client.post(CYCLE, json=c2(), headers=auth("dispatcher"))
    assert response.status_code == 200, response.get_json()
    body = response.get_json()
    assert set(body) == CYCLE_FIELDS
    assert body["cycle_days_continuous"] == pytest.approx(20000 / 1200, rel=1e-9)
    assert body["cost_per_day_continuous"] == pytest.approx(41.0, rel=1e-9)
    assert body["cycle_days"] == 16
    assert body["cost_per_day"] == pytest.approx(41.075, rel=1e-9)
    assert body["quantity"] == pytest.approx(1200 * 16, rel=1e-9)
    assert body["binding"] == "tank"


def test_cycle_admin_allowed_and_free_optimum_has_no_binding(client, auth):
    response = client.post(CYCLE, json=c2(tank_capacity=100000), headers=auth("admin"))
    assert response.status_code == 200
    body = response.get_json()
    # Free optimum T* = sqrt(2·350/(0.002·1200)) = 17.078251 d (EOQ, Harris 1913).
    assert body["cycle_days_continuous"] == pytest.approx(17.078251, rel=1e-7)
    assert body["binding"] is None
    assert body["cycle_days"] in (17, 18)


def test_cycle_truck_capacity_binding(client, auth):
    response = client.post(CYCLE, json=c2(tank_capacity=100000, truck_capacity=12000), headers=auth("dispatcher"))
    assert response.status_code == 200
    body = response.get_json()
    assert body["binding"] == "truck"
    assert body["cycle_days_continuous"] == pytest.approx(10.0, rel=1e-9)
    assert body["cycle_days"] == 10
    assert body["quantity"] <= 12000 + 1e-9
    # (K + k)/T + h d T / 2 at T = 10
    assert body["cost_per_day"] == pytest.approx(350 / 10 + 0.002 * 1200 * 10 / 2, rel=1e-9)


def test_cycle_tank_smaller_than_one_day_is_422_naming_the_field(client, auth, db_session):
    before = counts(db_session)
    response = client.post(CYCLE, json=c2(tank_capacity=1000), headers=auth("dispatcher"))
    assert response.status_code == 422
    assert response.mimetype == "application/problem+json"
    assert [e["pointer"] for e in response.get_json()["errors"]] == ["#/tank_capacity"]
    assert "less than one day" in response.get_json()["detail"]
    # Safety stock eating the usable stock (0.5 × 1000 − 450 = 50 < 100 a day) is the same refusal.
    response = client.post(
        CYCLE,
        json=c2(demand_per_day=100, tank_capacity=1000, safe_fill=0.5, safety_stock=450),
        headers=auth("dispatcher"),
    )
    assert response.status_code == 422
    assert [e["pointer"] for e in response.get_json()["errors"]] == ["#/tank_capacity"]
    assert counts(db_session) == before


def test_truck_smaller_than_one_day_is_422_naming_truck_capacity(client, auth):
    response = client.post(CYCLE, json=c2(truck_capacity=500), headers=auth("dispatcher"))
    assert response.status_code == 422
    assert [e["pointer"] for e in response.get_json()["errors"]] == ["#/truck_capacity"]
    body = joint_body(3, truck_capacity=300.0)
    response = client.post(JOINT, json=body, headers=auth("dispatcher"))
    assert response.status_code == 422
    assert [e["pointer"] for e in response.get_json()["errors"]] == ["#/truck_capacity"]
    # A joint site whose own tank is too small is named by its index.
    body = joint_body(3)
    body["sites"][1]["tank_capacity"] = 300.0
    response = client.post(JOINT, json=body, headers=auth("dispatcher"))
    assert response.status_code == 422
    assert [e["pointer"] for e in response.get_json()["errors"]] == ["#/sites/1/tank_capacity"]


def test_cycle_validation_errors_point_into_body(client, auth):
    response = client.post(CYCLE, json=c2(demand_per_day=-1), headers=auth("dispatcher"))
    assert response.status_code == 422
    assert "#/demand_per_day" in [e["pointer"] for e in response.get_json()["errors"]]
    body = c2()
    del body["holding_cost"]
    response = client.post(CYCLE, json=body, headers=auth("dispatcher"))
    assert response.status_code == 422
    assert "#/holding_cost" in [e["pointer"] for e in response.get_json()["errors"]]


@pytest.mark.parametrize("path", [CYCLE, JOINT])
def test_viewer_is_403_and_anonymous_401(client, auth, path, db_session):
    body = c2() if path == CYCLE else joint_body()
    response = client.post(path, json=body, headers=auth("viewer"))
    assert response.status_code == 403
    assert response.mimetype == "application/problem+json"
    response = client.post(path, json=body)
    assert response.status_code == 401
    assert response.mimetype == "application/problem+json"


# --- joint ---------------------------------------------------------------------------------


def test_joint_contract_field_names(client, auth, db_session):
    before = counts(db_session)
    response = client.post(JOINT, json=joint_body(5), headers=auth("dispatcher"))
    assert response.status_code == 200, response.get_json()
    body = response.get_json()
    assert JOINT_FIELDS <= set(body), JOINT_FIELDS - set(body)
    assert body["method"] in ("power_of_two", "integer")
    assert set(body["cost_breakdown"]) == {"dispatch", "stops", "holding"}
    assert isinstance(body["warnings"], list) and isinstance(body["trips_truncated"], bool)
    assert len(body["sites"]) == 5
    for site in body["sites"]:
        assert set(site) == JOINT_SITE_FIELDS
    assert body["status"] in ("optimal", "feasible") and body["needed"] is None
    assert body["trips"]
    for trip in body["trips"]:
        assert set(trip) == {"day", "date", "trip", "load", "stops"}
        assert 0 <= trip["day"] < body["repeat_days"]
        for stop in trip["stops"]:
            assert set(stop) == {"code", "quantity"}
        assert trip["load"] == pytest.approx(sum(s["quantity"] for s in trip["stops"]), rel=1e-9)
        assert trip["load"] <= 30000 + 1e-6
    assert {s["code"] for s in body["sites"]} == {f"S{i}" for i in range(5)}
    # Nothing is stored.
    assert counts(db_session) == before


def test_joint_breakdown_sums_to_cost_and_bound(client, auth):
    for method in ("power_of_two", "integer", "best"):
        response = client.post(JOINT, json=joint_body(6, method=method), headers=auth("admin"))
        assert response.status_code == 200, response.get_json()
        body = response.get_json()
        breakdown = body["cost_breakdown"]
        assert breakdown["dispatch"] + breakdown["stops"] + breakdown["holding"] == pytest.approx(
            body["cost_per_day"], rel=1e-9
        )
        assert body["lower_bound_per_day"] <= body["cost_per_day"] * (1 + 1e-9)
        assert body["gap"] == pytest.approx(body["cost_per_day"] / body["lower_bound_per_day"] - 1, rel=1e-6, abs=1e-12)
        if method != "best":
            assert body["method"] == method
        # Every site's quantity = demand × cycle (the definition of the planning core).
        demand = {s["code"]: s["demand_per_day"] for s in joint_body(6)["sites"]}
        for site in body["sites"]:
            assert site["quantity"] == pytest.approx(demand[site["code"]] * site["cycle_days"], rel=1e-9)


def test_joint_fixed_base_days(client, auth):
    body = joint_body(3, method="power_of_two", base_days=2, **UNCONSTRAINED_CALENDAR)
    response = client.post(JOINT, json=body, headers=auth("admin"))
    assert response.status_code == 200
    body = response.get_json()
    assert body["base_days"] == 2
    assert all(s["cycle_days"] % 2 == 0 for s in body["sites"])


def test_joint_duplicate_codes_point_at_the_second(client, auth, db_session):
    body = joint_body(3)
    body["sites"][2]["code"] = "S0"
    before = counts(db_session)
    response = client.post(JOINT, json=body, headers=auth("dispatcher"))
    assert response.status_code == 422
    assert response.mimetype == "application/problem+json"
    pointers = [e["pointer"] for e in response.get_json()["errors"]]
    assert "#/sites/2/code" in pointers, pointers
    assert counts(db_session) == before


def test_joint_bad_site_value_points_into_sites(client, auth):
    body = joint_body(3)
    body["sites"][1]["tank_capacity"] = -5
    response = client.post(JOINT, json=body, headers=auth("dispatcher"))
    assert response.status_code == 422
    assert "#/sites/1/tank_capacity" in [e["pointer"] for e in response.get_json()["errors"]]


def test_joint_zero_sites_is_422(client, auth):
    response = client.post(JOINT, json=joint_body(0), headers=auth("dispatcher"))
    assert response.status_code == 422
    assert response.mimetype == "application/problem+json"
    assert "#/sites" in [e["pointer"] for e in response.get_json()["errors"]]


def test_joint_100001_sites_is_422(client, auth):
    # The JSON text is built by string repetition (cheap), not by json.dumps of 100 001 dicts.
    n = 100_001
    item = '{"code":"S%d","demand_per_day":10,"holding_cost":0.001,"stop_cost":1,"tank_capacity":1000}'
    sites = ",".join(item % i for i in range(n))
    text = '{"dispatch_cost":100,"sites":[' + sites + "]}"
    assert json.loads(text)["sites"][-1]["code"] == f"S{n - 1}"
    response = client.post(JOINT, data=text, content_type="application/json", headers=auth("dispatcher"))
    assert response.status_code == 422, response.status_code
    assert response.mimetype == "application/problem+json"
    assert "#/sites" in [e["pointer"] for e in response.get_json()["errors"]]


def test_joint_unknown_field_is_422(client, auth):
    response = client.post(JOINT, json=joint_body(2, colour="red"), headers=auth("dispatcher"))
    assert response.status_code == 422
    assert "#/colour" in [e["pointer"] for e in response.get_json()["errors"]]
