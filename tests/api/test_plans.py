"""Recorded plans: create (idempotent), read, history, activate, staleness (issue 4 §2)."""

from __future__ import annotations

import datetime as dt
import hashlib
import json

import pytest
from contract import JOINT_FIELDS
from sqlalchemy import func, select

from service import idempotency
from service.persistence.models import IdempotencyRecord, Plan, Token
from tests.api.fleet_bodies import truck

PLAN_FIELDS = {
    "id",
    "truck",
    "status",
    "stale",
    "changed_sites",
    "start_date",
    "created_at",
    "created_by",
    "inputs",
    "inputs_digest",
}
SITE_PARAMS = {"demand_per_day", "holding_cost", "stop_cost", "tank_capacity", "safe_fill", "safety_stock"}
START = "2026-12-07"  # a Monday


def site(code: str, truck_code: str = "T1", **extra):
    return {
        "code": code,
        "name": f"Site {code}",
        "truck": truck_code,
        "demand_per_day": 300.0,
        "holding_cost": 0.002,
        "stop_cost": 30.0,
        "tank_capacity": 10000.0,
        "safety_stock": 500.0,
    } | extra


@pytest.fixture
def network(client, auth):
    for code in ("T1", "T2"):
        assert client.post("/api/v1/trucks", json=truck(code), headers=auth("admin")).status_code == 201
    for i, demand in enumerate((300.0, 120.0, 650.0)):
        body = site(f"A{i}", demand_per_day=demand)
        assert client.post("/api/v1/sites", json=body, headers=auth("admin")).status_code == 201
    assert client.post("/api/v1/sites", json=site("B0", "T2"), headers=auth("admin")).status_code == 201


def plans_count(db_session) -> int:
    return db_session.scalar(select(func.count()).select_from(Plan))


def record(client, auth, code="T1", body=None, role="dispatcher", **headers):
    response = client.post(
        f"/api/v1/trucks/{code}/plans",
        json={"start_date": START} if body is None else body,
        headers=auth(role, **headers),
    )
    assert response.status_code == 201, response.get_json()
    return response


def patch_site(client, auth, code, **changes):
    etag = client.get(f"/api/v1/sites/{code}", headers=auth("admin")).headers["ETag"]
    response = client.patch(f"/api/v1/sites/{code}", json=changes, headers=auth("admin", **{"If-Match": etag}))
    assert response.status_code == 200, response.get_json()
    return response


def recorded_numbers(body):
    # A plan's `status` is its own (proposed, active, superseded); its result's is `planning_status`.
    fields = (JOINT_FIELDS - {"status"}) | {"planning_status"}
    return {
        k: body[k] for k in (*fields, "inputs", "inputs_digest", "start_date", "created_at", "created_by", "id", "truck")
    }


# --- create & read ----------------------------------------------------------------------------


def test_create_returns_every_field_and_location(client, auth, network, db_session):
    response = record(client, auth)
    body = response.get_json()
    assert response.headers["Location"].endswith(f"/api/v1/plans/{body['id']}")
    assert PLAN_FIELDS | JOINT_FIELDS <= set(body), (PLAN_FIELDS | JOINT_FIELDS) - set(body)
    assert body["truck"] == "T1" and body["status"] == "proposed"
    assert body["stale"] is False and body["changed_sites"] == []
    assert body["start_date"] == START
    assert body["created_by"] == "test-dispatcher"
    created = dt.datetime.fromisoformat(body["created_at"])
    assert created.tzinfo is not None and abs(created - dt.datetime.now(dt.UTC)) < dt.timedelta(minutes=5)
    inputs = body["inputs"]
    assert {"dispatch_cost", "capacity", "max_stops", "version"} <= set(inputs["truck"])
    assert inputs["truck"]["capacity"] == 18000.0 and inputs["truck"]["dispatch_cost"] == 150.0
    assert sorted(s["code"] for s in inputs["sites"]) == ["A0", "A1", "A2"]  # T1's sites only
    for s in inputs["sites"]:
        assert SITE_PARAMS | {"code", "version"} <= set(s)
        assert s["version"] == 1
    # inputs_digest = SHA-256 of the canonical JSON of inputs (sorted keys, no whitespace).
    canonical = json.dumps(inputs, sort_keys=True, separators=(",", ":")).encode()
    assert body["inputs_digest"] == hashlib.sha256(canonical).hexdigest()
    assert {s["code"] for s in body["sites"]} == {"A0", "A1", "A2"}
    breakdown = body["cost_breakdown"]
    assert sum(breakdown.values()) == pytest.approx(body["cost_per_day"], rel=1e-9)
    assert plans_count(db_session) == 1

    again = client.get(response.headers["Location"], headers=auth("viewer"))
    assert again.status_code == 200
    assert again.get_json() == body


def test_create_defaults_start_date_to_today(client, auth, network):
    body = record(client, auth, body={}).get_json()
    assert body["start_date"] == dt.datetime.now(dt.UTC).date().isoformat()
    assert body["method"] in ("power_of_two", "integer")


def test_create_with_method_and_base_days(client, auth, network):
    body = record(client, auth, body={"method": "power_of_two", "base_days": 2, "start_date": START}).get_json()
    assert body["method"] == "power_of_two" and body["base_days"] == 2
    body = record(client, auth, body={"method": "integer", "start_date": START}).get_json()
    assert body["method"] == "integer"


def test_create_errors(client, auth, network, db_session):
    assert client.post("/api/v1/trucks/NOPE/plans", json={}, headers=auth("admin")).status_code == 404
    response = client.post("/api/v1/trucks/T1/plans", json={"method": "magic"}, headers=auth("admin"))
    assert response.status_code == 422
    assert "#/method" in [e["pointer"] for e in response.get_json()["errors"]]
    response = client.post("/api/v1/trucks/T1/plans", json={"start_date": "07/12/2026"}, headers=auth("admin"))
    assert response.status_code == 422
    assert client.post("/api/v1/trucks", json=truck("T3"), headers=auth("admin")).status_code == 201
    response = client.post("/api/v1/trucks/T3/plans", json={}, headers=auth("admin"))
    assert response.status_code == 422 and response.mimetype == "application/problem+json"
    assert plans_count(db_session) == 0


def test_get_unknown_plan_is_404(client, auth):
    response = client.get("/api/v1/plans/999999", headers=auth("viewer"))
    assert response.status_code == 404
    assert response.mimetype == "application/problem+json"


# --- history ------------------------------------------------------------------------------------


def test_history_newest_first_with_keyset_pages(client, auth, network):
    ids = [record(client, auth).get_json()["id"] for _ in range(5)]
    record(client, auth, code="T2")
    seen, url = [], "/api/v1/trucks/T1/plans?limit=2"
    pages = 0
    while url:
        response = client.get(url, headers=auth("viewer"))
        assert response.status_code == 200
        items = response.get_json()["items"]
        assert len(items) <= 2
        for item in items:
            assert item["truck"] == "T1"
            assert {"id", "status", "stale", "start_date", "cost_per_day", "created_at"} <= set(item)
        seen += [i["id"] for i in items]
        pages += 1
        link = response.headers.get("Link")
        if link:
            assert link.endswith('>; rel="next"')
            url = link[link.index("<") + 1 : link.index(">")]
            assert "after=" in url and "limit=2" in url
        else:
            url = None
    assert seen == sorted(ids, reverse=True)
    assert pages == 3
    assert client.get("/api/v1/trucks/NOPE/plans", headers=auth("viewer")).status_code == 404
    assert client.get("/api/v1/trucks/T1/plans?bogus=1", headers=auth("viewer")).status_code == 422


# --- activation -----------------------------------------------------------------------------------


def statuses(client, auth, code="T1"):
    items = client.get(f"/api/v1/trucks/{code}/plans?limit=200", headers=auth("viewer")).get_json()["items"]
    return {i["id"]: i["status"] for i in items}


def test_activate_supersedes_previous_one_active_per_truck(client, auth, network, db_session):
    first = record(client, auth).get_json()["id"]
    second = record(client, auth).get_json()["id"]
    other = record(client, auth, code="T2").get_json()["id"]
    response = client.post(f"/api/v1/plans/{first}/activate", headers=auth("dispatcher"))
    assert response.status_code == 200
    assert response.get_json()["status"] == "active"
    assert client.post(f"/api/v1/plans/{other}/activate", headers=auth("admin")).status_code == 200
    assert statuses(client, auth) == {first: "active", second: "proposed"}
    response = client.post(f"/api/v1/plans/{second}/activate", headers=auth("dispatcher"))
    assert response.status_code == 200 and response.get_json()["status"] == "active"
    assert statuses(client, auth) == {first: "superseded", second: "active"}
    assert statuses(client, auth, "T2") == {other: "active"}
    # Activating the active plan again changes nothing.
    assert client.post(f"/api/v1/plans/{second}/activate", headers=auth("dispatcher")).status_code == 200
    assert statuses(client, auth) == {first: "superseded", second: "active"}
    # A superseded plan may be re-activated.
    assert client.post(f"/api/v1/plans/{first}/activate", headers=auth("dispatcher")).status_code == 200
    assert statuses(client, auth) == {first: "active", second: "superseded"}
    db_session.expire_all()
    active = db_session.scalar(select(func.count()).select_from(Plan).where(Plan.status == "active"))
    assert active == 2  # one per truck
    assert client.post("/api/v1/plans/999999/activate", headers=auth("admin")).status_code == 404


# --- the acceptance: stale plan keeps its numbers -----------------------------------------------


def test_changed_site_makes_plan_stale_but_numbers_stay(client, auth, network):
    original = record(client, auth).get_json()
    url = f"/api/v1/plans/{original['id']}"
    activated = client.post(f"{url}/activate", headers=auth("dispatcher")).get_json()
    assert activated["status"] == "active"
    assert recorded_numbers(activated) == recorded_numbers(original)

    patch_site(client, auth, "A1", demand_per_day=480.0, tank_capacity=15000.0)
    now = client.get(url, headers=auth("viewer")).get_json()
    assert now["stale"] is True and now["changed_sites"] == ["A1"]
    assert now["status"] == "active"
    assert recorded_numbers(now) == recorded_numbers(original)
    a1 = next(s for s in now["inputs"]["sites"] if s["code"] == "A1")
    assert a1["demand_per_day"] == 120.0 and a1["version"] == 1
    # A new plan sees the new parameters; the old one still does not.
    fresh = record(client, auth).get_json()
    assert fresh["stale"] is False
    assert next(s for s in fresh["inputs"]["sites"] if s["code"] == "A1")["version"] == 2
    assert fresh["inputs_digest"] != original["inputs_digest"]
    assert recorded_numbers(client.get(url, headers=auth("viewer")).get_json()) == recorded_numbers(original)


def test_added_site_makes_plan_stale(client, auth, network):
    original = record(client, auth).get_json()
    assert client.post("/api/v1/sites", json=site("A9"), headers=auth("admin")).status_code == 201
    now = client.get(f"/api/v1/plans/{original['id']}", headers=auth("viewer")).get_json()
    assert now["stale"] is True and now["changed_sites"] == ["A9"]
    assert recorded_numbers(now) == recorded_numbers(original)


def test_deactivated_site_makes_plan_stale(client, auth, network):
    original = record(client, auth).get_json()
    patch_site(client, auth, "A0", active=False)
    now = client.get(f"/api/v1/plans/{original['id']}", headers=auth("viewer")).get_json()
    assert now["stale"] is True and now["changed_sites"] == ["A0"]
    assert recorded_numbers(now) == recorded_numbers(original)
    # A site of another truck changing does not make T1's plan stale.
    other = record(client, auth, code="T2").get_json()
    patch_site(client, auth, "A2", stop_cost=31.0)
    assert client.get(f"/api/v1/plans/{other['id']}", headers=auth("viewer")).get_json()["stale"] is False


def test_changed_truck_makes_plan_stale(client, auth, network):
    original = record(client, auth).get_json()
    etag = client.get("/api/v1/trucks/T1", headers=auth("admin")).headers["ETag"]
    response = client.patch(
        "/api/v1/trucks/T1", json={"capacity": 20000.0}, headers=auth("admin", **{"If-Match": etag})
    )
    assert response.status_code == 200, response.get_json()
    now = client.get(f"/api/v1/plans/{original['id']}", headers=auth("viewer")).get_json()
    assert now["stale"] is True and now["changed_sites"] == []
    assert recorded_numbers(now) == recorded_numbers(original)
    assert now["inputs"]["truck"]["capacity"] == 18000.0


def test_site_moved_to_another_truck_makes_both_stale(client, auth, network):
    t1 = record(client, auth).get_json()
    t2 = record(client, auth, code="T2").get_json()
    patch_site(client, auth, "A2", truck="T2")
    for plan in (t1, t2):
        now = client.get(f"/api/v1/plans/{plan['id']}", headers=auth("viewer")).get_json()
        assert now["stale"] is True and now["changed_sites"] == ["A2"]
        assert recorded_numbers(now) == recorded_numbers(plan)


# --- Idempotency-Key ---------------------------------------------------------------------------


def test_same_key_same_body_replays(client, auth, network, db_session):
    first = record(client, auth, **{"Idempotency-Key": '"key-1"'})
    again = client.post(
        "/api/v1/trucks/T1/plans",
        json={"start_date": START},
        headers=auth("dispatcher", **{"Idempotency-Key": '"key-1"'}),
    )
    assert again.status_code == 201
    assert again.headers.get("Ullage-Replayed") == "true"
    # Our own name only: the payments-API header name is not sent (issue 18).
    assert not any(name.lower() == "idempotent-replayed" for name in again.headers.keys())
    assert again.get_json() == first.get_json()
    assert again.headers["Location"] == first.headers["Location"]
    assert "Ullage-Replayed" not in first.headers
    assert plans_count(db_session) == 1
    # The bare form of the same key is the same key.
    bare = client.post(
        "/api/v1/trucks/T1/plans",
        json={"start_date": START},
        headers=auth("dispatcher", **{"Idempotency-Key": "key-1"}),
    )
    assert bare.status_code == 201 and bare.get_json()["id"] == first.get_json()["id"]
    assert plans_count(db_session) == 1


def test_same_key_different_body_is_422(client, auth, network, db_session):
    record(client, auth, **{"Idempotency-Key": '"key-2"'})
    response = client.post(
        "/api/v1/trucks/T1/plans",
        json={"start_date": "2026-12-14"},
        headers=auth("dispatcher", **{"Idempotency-Key": '"key-2"'}),
    )
    assert response.status_code == 422
    assert response.mimetype == "application/problem+json"
    # Another truck (another path) with the same key is a different request too.
    response = client.post(
        "/api/v1/trucks/T2/plans",
        json={"start_date": START},
        headers=auth("dispatcher", **{"Idempotency-Key": '"key-2"'}),
    )
    assert response.status_code == 422
    assert plans_count(db_session) == 1


def test_key_is_scoped_per_token(client, auth, network, db_session):
    a = record(client, auth, role="dispatcher", **{"Idempotency-Key": '"shared"'}).get_json()
    b = record(client, auth, role="admin", **{"Idempotency-Key": '"shared"'}).get_json()
    assert a["id"] != b["id"]
    assert plans_count(db_session) == 2


@pytest.mark.parametrize("key", ['""', "has space", "x" * 256, '"unterminated', '"a"b"', 'a"b', "caf\u00e9"])
def test_malformed_key_is_400(client, auth, network, db_session, key):
    headers = auth("dispatcher")
    headers["Idempotency-Key"] = key
    try:
        response = client.post("/api/v1/trucks/T1/plans", json={"start_date": START}, headers=headers)
    except (UnicodeEncodeError, ValueError):
        pytest.skip("the test client cannot send this header")
    assert response.status_code == 400
    assert response.mimetype == "application/problem+json"
    assert plans_count(db_session) == 0


def _token_id(db_session, name="test-dispatcher") -> int:
    return db_session.scalars(select(Token.id).where(Token.name == name)).one()


def _claim(db_session, key: str, claimed_at: dt.datetime) -> None:
    body = json.dumps({"start_date": START}).encode()
    db_session.add(
        IdempotencyRecord(
            token_id=_token_id(db_session),
            idempotency_key=key,
            method="POST",
            path="/api/v1/trucks/T1/plans",
            body_sha256=idempotency.fingerprint("POST", "/api/v1/trucks/T1/plans", body),
            state="in_progress",
            claim="0" * 32,
            claimed_at=claimed_at,
            created_at=claimed_at,
        )
    )
    db_session.commit()


def test_held_claim_is_409_with_retry_after(client, auth, network, db_session):
    _claim(db_session, "busy", dt.datetime.now(dt.UTC))
    response = client.post(
        "/api/v1/trucks/T1/plans",
        json={"start_date": START},
        headers=auth("dispatcher", **{"Idempotency-Key": '"busy"'}),
    )
    assert response.status_code == 409
    assert response.mimetype == "application/problem+json"
    assert int(response.headers["Retry-After"]) >= 0
    assert plans_count(db_session) == 0


def test_expired_lease_is_taken_over_once(client, auth, network, db_session):
    _claim(db_session, "stale", dt.datetime.now(dt.UTC) - idempotency.LEASE - dt.timedelta(seconds=5))
    headers = auth("dispatcher", **{"Idempotency-Key": '"stale"'})
    first = client.post("/api/v1/trucks/T1/plans", json={"start_date": START}, headers=headers)
    assert first.status_code == 201, first.get_json()
    again = client.post("/api/v1/trucks/T1/plans", json={"start_date": START}, headers=headers)
    assert again.status_code == 201 and again.headers.get("Ullage-Replayed") == "true"
    assert again.get_json()["id"] == first.get_json()["id"]
    assert plans_count(db_session) == 1
    db_session.expire_all()
    row = db_session.scalars(select(IdempotencyRecord).where(IdempotencyRecord.idempotency_key == "stale")).one()
    assert row.state == "done" and row.claim != "0" * 32


def test_overtaken_original_cannot_finish(app, client, auth, network, db_session):
    """A worker whose lease ran out and was taken over can no longer record its response."""
    from flask import Response

    from service.auth import Caller
    from service.errors import Problem

    caller = Caller(_token_id(db_session), "test-dispatcher", "dispatcher")
    body = json.dumps({"start_date": START}).encode()
    with app.test_request_context("/api/v1/trucks/T1/plans", method="POST"):
        original = idempotency.begin(caller, "overtaken", "POST", "/api/v1/trucks/T1/plans", body)
        assert isinstance(original, idempotency.Claim)
    row = db_session.get(IdempotencyRecord, original.record_id)
    row.claimed_at = dt.datetime.now(dt.UTC) - idempotency.LEASE - dt.timedelta(seconds=1)
    db_session.commit()
    retry = client.post(
        "/api/v1/trucks/T1/plans",
        json={"start_date": START},
        headers=auth("dispatcher", **{"Idempotency-Key": "overtaken"}),
    )
    assert retry.status_code == 201
    with app.test_request_context("/api/v1/trucks/T1/plans", method="POST"):
        session = app.extensions["ullage.sessionmaker"]()
        try:
            with pytest.raises(Problem) as refused:
                idempotency.finish(session, original, Response("{}", status=201))
            assert refused.value.status == 409
        finally:
            session.close()
    assert plans_count(db_session) == 1
    replay = client.post(
        "/api/v1/trucks/T1/plans",
        json={"start_date": START},
        headers=auth("dispatcher", **{"Idempotency-Key": "overtaken"}),
    )
    assert replay.get_json()["id"] == retry.get_json()["id"]


def test_key_expires_after_24_hours(client, auth, network, db_session):
    headers = auth("dispatcher", **{"Idempotency-Key": '"old-key"'})
    first = client.post("/api/v1/trucks/T1/plans", json={"start_date": START}, headers=headers).get_json()
    row = db_session.scalars(select(IdempotencyRecord).where(IdempotencyRecord.idempotency_key == "old-key")).one()
    row.created_at = dt.datetime.now(dt.UTC) - idempotency.TTL - dt.timedelta(minutes=1)
    db_session.commit()
    again = client.post("/api/v1/trucks/T1/plans", json={"start_date": START}, headers=headers)
    assert again.status_code == 201 and "Ullage-Replayed" not in again.headers
    assert again.get_json()["id"] != first["id"]
    assert plans_count(db_session) == 2
    # Within 24 h the (new) key replays, even with a different body it is still refused.
    assert (
        client.post("/api/v1/trucks/T1/plans", json={"start_date": START}, headers=headers).headers.get(
            "Ullage-Replayed"
        )
        == "true"
    )
    assert client.post("/api/v1/trucks/T1/plans", json={}, headers=headers).status_code == 422


def test_invalid_body_claims_nothing(client, auth, network, db_session):
    headers = auth("dispatcher", **{"Idempotency-Key": '"fix-then-retry"'})
    assert client.post("/api/v1/trucks/T1/plans", json={"method": "nope"}, headers=headers).status_code == 422
    assert client.post("/api/v1/trucks/T1/plans", json={"start_date": START}, headers=headers).status_code == 201
    assert plans_count(db_session) == 1


def test_failed_request_frees_its_key(client, auth, network, db_session):
    headers = auth("dispatcher", **{"Idempotency-Key": '"retry-me"'})
    response = client.post("/api/v1/trucks/NOPE/plans", json={"start_date": START}, headers=headers)
    assert response.status_code == 404
    db_session.expire_all()
    assert db_session.scalar(select(func.count()).select_from(IdempotencyRecord)) == 0


# --- roles ------------------------------------------------------------------------------------------


def test_roles(client, auth, network, db_session):
    plan_id = record(client, auth).get_json()["id"]
    assert client.post("/api/v1/trucks/T1/plans", json={}, headers=auth("viewer")).status_code == 403
    assert client.post(f"/api/v1/plans/{plan_id}/activate", headers=auth("viewer")).status_code == 403
    assert client.post("/api/v1/trucks/T1/plans", json={}).status_code == 401
    assert client.post(f"/api/v1/plans/{plan_id}/activate").status_code == 401
    assert client.get(f"/api/v1/plans/{plan_id}").status_code == 401
    assert client.get("/api/v1/trucks/T1/plans").status_code == 401
    bad = {"Authorization": "Bearer nope"}
    assert client.get(f"/api/v1/plans/{plan_id}", headers=bad).status_code == 401
    assert client.get(f"/api/v1/plans/{plan_id}", headers=auth("viewer")).status_code == 200
    assert client.get("/api/v1/trucks/T1/plans", headers=auth("viewer")).status_code == 200
    assert plans_count(db_session) == 1
    assert statuses(client, auth) == {plan_id: "proposed"}
