"""A client generated from the served OpenAPI document drives the weekly loop (issue 18).

The generator is openapi-python-client (PyPI; it writes an httpx client from an OpenAPI 3 document,
offline). The document is read from the running service, the client is generated into a temporary
directory and imported, and the weekly loop runs through it against a live server: trucks and sites
(admin), a plan with an Idempotency-Key and its replay (dispatcher), activation with If-Match, the
trips with their ETag and a 304 for If-None-Match, a tank reading.

It fails when the document is wrong for these calls: a header parameter the document does not
declare is no keyword of the generated function (TypeError); a status the document does not list
is parsed as a problem, not as the model the test expects; a value outside a documented enum
(notice kinds, plan status, problem types) fails the model's parsing; a field the server sends
that the document does not declare is missing from the model's ``to_dict()``, which the test
compares with the answer as sent.
"""

from __future__ import annotations

import datetime as dt
import importlib
import json
import subprocess
import sys
from pathlib import Path

import httpx
import pytest
from live_server import serving

PACKAGE = "ullage_generated_client"
GENERATOR = Path(sys.executable).with_name("openapi-python-client")
START = dt.date(2026, 12, 7)  # Monday of ISO week 2026-W50
SITES = (("LOOP-A", 300.0), ("LOOP-B", 120.0))


def _same_keys(sent, parsed, where: str = "#") -> None:  # type: ignore[no-untyped-def]
    """The answer as sent and as the generated model gives it back have the same members at every
    level: a member the document does not declare is dropped (or kept aside) by the model."""
    if isinstance(sent, dict):
        assert set(sent) == set(parsed), (where, set(sent) ^ set(parsed))
        for key in sent:
            _same_keys(sent[key], parsed[key], f"{where}/{key}")
    elif isinstance(sent, list):
        assert len(sent) == len(parsed), where
        for index, (a, b) in enumerate(zip(sent, parsed, strict=True)):
            _same_keys(a, b, f"{where}/{index}")


def _all_declared(response) -> None:  # type: ignore[no-untyped-def]
    _same_keys(json.loads(response.content), response.parsed.to_dict())


@pytest.fixture
def generated(app, tokens, tmp_path):  # type: ignore[no-untyped-def]
    """(the generated package, the live server's base URL)."""
    with serving(app) as base:
        document = httpx.get(f"{base}/api/v1/openapi.json", headers={"Authorization": f"Bearer {tokens['viewer']}"})
        assert document.status_code == 200
        spec = tmp_path / "openapi.json"
        spec.write_text(json.dumps(document.json()))
        config = tmp_path / "generator.yaml"
        # The generator has no text/csv bodies; it sends the CSV import's body as raw bytes.
        config.write_text(
            f"post_hooks: []\npackage_name_override: {PACKAGE}\n"
            "content_type_overrides:\n  text/csv: application/octet-stream\n"
        )
        out = tmp_path / "client" / PACKAGE
        run = subprocess.run(
            [str(GENERATOR), "generate", "--path", str(spec), "--config", str(config), "--meta", "none",
             "--output-path", str(out)],
            capture_output=True,
            text=True,
            timeout=120,
            check=False,
        )
        assert run.returncode == 0, run.stdout + run.stderr
        # Every operation is generated: the generator warns about none.
        assert "WARNING" not in run.stdout + run.stderr, run.stdout + run.stderr
        sys.path.insert(0, str(out.parent))
        try:
            yield importlib.import_module(PACKAGE), base
        finally:
            sys.path.remove(str(out.parent))
            for name in [n for n in sys.modules if n == PACKAGE or n.startswith(PACKAGE + ".")]:
                del sys.modules[name]


def _api(package, name: str):  # type: ignore[no-untyped-def]
    return importlib.import_module(f"{package.__name__}.api.{name}")


def test_the_weekly_loop_through_a_generated_client(generated, tokens):
    package, base = generated
    client_module = importlib.import_module(f"{PACKAGE}.client")
    models = importlib.import_module(f"{PACKAGE}.models")

    def client(role: str):  # type: ignore[no-untyped-def]
        return client_module.AuthenticatedClient(base_url=base, token=tokens[role], raise_on_unexpected_status=True)

    admin, dispatcher, viewer = client("admin"), client("dispatcher"), client("viewer")
    trucks = _api(package, "trucks.post_api_v1_trucks")
    sites = _api(package, "sites.post_api_v1_sites")
    plans = _api(package, "plans.post_api_v1_trucks_code_plans")
    plan_by_id = _api(package, "plans.get_api_v1_plans_plan_id")
    activate = _api(package, "plans.post_api_v1_plans_plan_id_activate")
    trips = _api(package, "plans.get_api_v1_trucks_code_trips")
    readings = _api(package, "readings.post_api_v1_sites_code_readings")

    # Admin: a truck and two sites (201 with Location and ETag).
    truck = trucks.sync_detailed(
        client=admin, body=models.Truck(code="LOOP-T", name="Loop truck", dispatch_cost=150.0, capacity=18000.0)
    )
    assert truck.status_code == 201 and isinstance(truck.parsed, models.Truck)
    assert truck.headers["Location"].endswith("/api/v1/trucks/LOOP-T") and truck.headers["ETag"].startswith('"')
    for code, demand in SITES:
        site = sites.sync_detailed(
            client=admin,
            body=models.Site(
                code=code,
                name=f"Site {code}",
                truck="LOOP-T",
                demand_per_day=demand,
                holding_cost=0.002,
                stop_cost=30.0,
                tank_capacity=10000.0,
                safety_stock=500.0,
            ),
        )
        assert site.status_code == 201 and site.parsed.code == code
        _all_declared(site)

    # Dispatcher: record a plan with an Idempotency-Key; the retry is the stored answer.
    request = models.PlanRequest(start_date=START)
    first = plans.sync_detailed("LOOP-T", client=dispatcher, body=request, idempotency_key='"loop-2026-w50"')
    assert first.status_code == 201 and isinstance(first.parsed, models.Plan), first.content
    _all_declared(first)
    assert first.parsed.status == models.PlanStatus.PROPOSED
    assert "Ullage-Replayed" not in first.headers
    again = plans.sync_detailed("LOOP-T", client=dispatcher, body=request, idempotency_key='"loop-2026-w50"')
    assert again.status_code == 201 and again.headers["Ullage-Replayed"] == "true"
    assert again.parsed.id == first.parsed.id and again.headers["Location"] == first.headers["Location"]

    # Read the plan (ETag), then activate exactly that version (If-Match); a stale tag is 412.
    read = plan_by_id.sync_detailed(first.parsed.id, client=viewer)
    assert read.status_code == 200 and isinstance(read.parsed, models.Plan)
    refused = activate.sync_detailed(first.parsed.id, client=dispatcher, if_match='"not-the-current-tag"')
    assert refused.status_code == 412 and isinstance(refused.parsed, models.Problem)
    assert refused.parsed.type_ == models.ProblemType("https://ullage.invalid/problems/precondition-failed")
    active = activate.sync_detailed(first.parsed.id, client=dispatcher, if_match=read.headers["ETag"])
    assert active.status_code == 200 and active.parsed.status == models.PlanStatus.ACTIVE
    _all_declared(active)

    # The weekly call: trips with an ETag, then 304 for If-None-Match.
    week = trips.sync_detailed("LOOP-T", client=viewer, week="2026-W50")
    assert week.status_code == 200 and isinstance(week.parsed, models.Trips), week.content
    _all_declared(week)
    assert week.parsed.from_ == START and week.parsed.plan_id == first.parsed.id
    stops = [stop for trip in week.parsed.trips for stop in trip.stops]
    assert {stop.site for stop in stops} <= {code for code, _ in SITES} and stops
    etag = week.headers["ETag"]
    unchanged = trips.sync_detailed("LOOP-T", client=viewer, week="2026-W50", if_none_match=etag)
    assert unchanged.status_code == 304 and unchanged.headers["ETag"] == etag

    # A tank reading (201 with Location); the trips answer moves on, so the old tag no longer matches.
    now = dt.datetime.now(dt.UTC).replace(microsecond=0) - dt.timedelta(hours=1)
    reading = readings.sync_detailed(
        "LOOP-A", client=dispatcher, body=models.ReadingRequest(level=6400.0, measured_at=now)
    )
    assert reading.status_code == 201 and isinstance(reading.parsed, models.Reading), reading.content
    assert reading.parsed.level == 6400.0 and reading.parsed.measured_at == now
    _all_declared(reading)
    assert reading.headers["Location"].endswith("/api/v1/sites/LOOP-A/readings")
    after = trips.sync_detailed("LOOP-T", client=viewer, week="2026-W50", if_none_match=etag)
    assert after.status_code == 200 and after.headers["ETag"] != etag
    _all_declared(after)
    for trip in after.parsed.trips:
        for stop in trip.stops:
            for warning in stop.warnings:
                assert isinstance(warning.kind, models.NoticeKind)
