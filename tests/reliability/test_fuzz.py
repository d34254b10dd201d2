"""Property-based fuzzing of every API operation with schemathesis, in-process through the WSGI app.

* The app's own OpenAPI document (``/api/v1/openapi.json``; reading it needs a viewer token, an
  admin token is used), every operation, authenticated as admin.
* Fixed seed (``derandomize=True``), at least 100 examples per operation, positive **and** negative
  data (schemathesis' default modes), **all** checks: not_a_server_error, status_code_conformance,
  content_type_conformance, response_headers_conformance, response_schema_conformance,
  negative_data_rejection, positive_data_acceptance, missing_required_header, unsupported_method, …
* On top: no ``NaN``/``Infinity`` in any response body.
* The weekly call is reached: both demo trucks have an active plan before fuzzing starts, and the
  positive cases of ``GET /trucks/{code}/trips`` are given valid data (a demo truck's code and a
  window JSON Schema cannot state: one ISO week, or ``from`` ≤ ``to`` at most 92 days apart,
  anywhere in the accepted date range). At least a third of the trips cases must answer 200.
* On SQLite and on PostgreSQL (the ``database_url`` fixture of ``tests/conftest.py``).
"""

from __future__ import annotations

import datetime as dt
import json

import pytest
import schemathesis
from hypothesis import HealthCheck, settings
from hypothesis import strategies as st
from schemathesis.generation.meta import TestPhase
from schemathesis.generation.modes import GenerationMode

from service.api.fields import FIRST_DATE, LAST_DATE
from service.config import load_settings

#: Fuzzing-phase examples per operation (hypothesis' ``max_examples``; the coverage and examples
#: phases add their own cases); the trips operation gets more, see ``TRIPS_EXAMPLES``.
EXAMPLES = 100
#: Counts the cases run, per database and operation, for the report printed at the end.
CASES: dict[tuple[str, str], int] = {}
TRIPS = "GET /api/v1/trucks/{code}/trips"
#: Trips cases answered 200, per database.
TRIPS_OK: dict[str, int] = {}
#: The demo network's trucks (service/sample_data/trucks.csv); each gets an active plan before fuzzing.
DEMO_TRUCKS = ("HV-R1", "HV-R2")
#: About half the fuzzing cases are negative (and the coverage phase adds ~50 mostly negative
#: ones), so the weekly call gets enough examples for its positive ones to be a third or more.
TRIPS_EXAMPLES = 300
#: The longest trips window the service takes by default (ULLAGE_MAX_TRIPS_DAYS).
MAX_WINDOW_DAYS = load_settings(environ={}).max_trips_days


#: ``positive_data_acceptance`` expects 2xx/3xx/401/403/404/409/429 for a schema-valid request.
#: These operations also answer a documented status to a request that is schema-valid but refused
#: on grounds JSON Schema cannot state; each entry gives the reason. No check is switched off.
POSITIVE_ALSO = {
    # A generated If-Match can never equal the row's current ETag: refusing it is the whole point.
    "DELETE /api/v1/sites/{code}": (412,),
    "PATCH /api/v1/trucks/{code}": (412,),
    "DELETE /api/v1/trucks/{code}": (412,),
    "PATCH /api/v1/depots/{code}": (412,),
    # Issue 16: a truck's depot and products must name stored rows, its compartments sum to its
    # capacity (a relation between fields and rows, not a field bound).
    "POST /api/v1/trucks": (422,),
    # The optional If-Match of an activation: a generated tag never equals the plan's current ETag.
    "POST /api/v1/plans/{plan_id}/activate": (412,),
    # Cross-field physics: usable stock (tank_capacity × safe_fill − safety_stock, capped by the
    # truck) must hold at least one day of demand; a relation between fields, not a field bound.
    "POST /api/v1/calculations/cycle": (422,),
    "POST /api/v1/calculations/joint": (422,),
    # State, not shape: the truck must have active, plannable sites.
    "POST /api/v1/trucks/{code}/plans": (422,),
    # The level must not exceed *this site's* stored tank_capacity; measured_at not in the future.
    "POST /api/v1/sites/{code}/readings": (422,),
    # The named truck must exist; safety_stock < safe_fill × tank_capacity and the usable stock
    # lasts one day of demand (cross-field, and across site and truck). A PATCH also meets the
    # If-Match refusal above.
    "POST /api/v1/sites": (422,),  # and its product must be stored (issue 16)
    "PATCH /api/v1/sites/{code}": (412, 422),
    # Some YYYY-W53 do not exist (2025-W53); `week` and `from`/`to` exclude each other; from ≤ to,
    # at most 92 days.
    "GET /api/v1/trucks/{code}/trips": (422,),
    # The body is documented as text/csv (a string): its header row and columns cannot be stated in
    # JSON Schema, so an arbitrary string is schema-valid yet not a sites CSV.
    "POST /api/v1/sites/import": (422,),
    # Issue 15. A delivery's levels and quantity against *this site's* tank, its time not in the
    # future, its truck existing; an Idempotency-Key the fuzzer reuses with another body.
    "POST /api/v1/sites/{code}/deliveries": (422,),
    # Bulk rows name sites (and trucks) that must exist, with the checks above; a CSV body is a
    # string, as for the sites import.
    "POST /api/v1/deliveries": (422,),
    "POST /api/v1/readings": (422,),
    # If-Match as above; too little data for an estimate (no-estimate) or a result that breaks a
    # site rule.
    "POST /api/v1/sites/{code}/apply-estimate": (412, 422),
    # Weather days: `mean_temperature`, or `min_temperature` and `max_temperature` (one of the two
    # ways, min ≤ max), each day once, no observed day after today, a region named like a code;
    # as CSV, any string is schema-valid. Relations between fields and rows, not field bounds.
    "POST /api/v1/weather/{region}": (422,),
    # `from` ≤ `to`.
    "GET /api/v1/weather/{region}": (422,),
    # Issue 16. State, not shape: every truck planned needs a depot and every site coordinates
    # (trucks the fuzzer created have none), the named trucks must exist, and an Idempotency-Key
    # the fuzzer reuses with another body is refused.
    "POST /api/v1/network-plans": (422,),
}
DEFAULT_POSITIVE = ["2xx", "3xx", "401", "403", "404", "409", "429"]
#: ``missing_required_header`` expects 400/401/403/406/415/422; a missing If-Match is answered
#: 428 Precondition Required, the status RFC 6585 §3 defines for exactly that.
IF_MATCH_OPERATIONS = (
    "POST /api/v1/sites/{code}/apply-estimate",
    "PATCH /api/v1/sites/{code}",
    "DELETE /api/v1/sites/{code}",
    "PATCH /api/v1/trucks/{code}",
    "DELETE /api/v1/trucks/{code}",
    "PATCH /api/v1/depots/{code}",
)
DEFAULT_MISSING_HEADER = ["400", "401", "403", "406", "415", "422"]
#: The one check switched off, for two operations, and why: ``/sites/import`` and ``/sites/export``
#: overlap the templated ``/sites/{code}``, so werkzeug's ``Allow`` for those concrete paths also
#: lists GET/PATCH/DELETE of ``/sites/{code}`` (a GET of /sites/import *is* routed to the site
#: lookup). Reported to the lead as a route-design finding (reserve the codes or rename the paths).
ALLOW_OVERLAP = ("POST /api/v1/sites/import", "GET /api/v1/sites/export")


def fuzz_config(token: str) -> schemathesis.Config:
    per_operation: dict[str, dict] = {}
    for name, extra in POSITIVE_ALSO.items():
        per_operation.setdefault(name, {})["positive_data_acceptance"] = {
            "expected-statuses": DEFAULT_POSITIVE + [str(s) for s in extra]
        }
    for name in IF_MATCH_OPERATIONS:
        per_operation.setdefault(name, {})["missing_required_header"] = {
            "expected-statuses": [*DEFAULT_MISSING_HEADER, "428"]
        }
    for name in ALLOW_OVERLAP:
        per_operation.setdefault(name, {})["allow_header_conformance"] = {"enabled": False}
    operations = [{"include-name": name, "checks": checks} for name, checks in per_operation.items()]
    for operation in operations:
        if operation["include-name"] == TRIPS:
            operation["generation"] = {"max-examples": TRIPS_EXAMPLES}
    # The token goes through schemathesis' own auth config (scheme "bearer" of the document), so it
    # knows the Authorization header is supplied and its ignored_auth check can test it honestly.
    return schemathesis.Config.from_dict(
        {
            "generation": {"max-examples": EXAMPLES},
            "operations": operations,
            "auth": {"openapi": {"bearer": {"bearer": token}}},
        }
    )


@pytest.fixture
def active_plans(app, demo, tokens) -> None:
    """Record and activate a plan for each demo truck, so that the trips operation has something to answer."""
    client = app.test_client()
    headers = {"Authorization": f"Bearer {tokens['dispatcher']}"}
    for code in DEMO_TRUCKS:
        created = client.post(f"/api/v1/trucks/{code}/plans", json={}, headers=headers)
        assert created.status_code == 201, created.get_data(as_text=True)
        activated = client.post(f"/api/v1/plans/{created.get_json()['id']}/activate", headers=headers)
        assert activated.status_code == 200, activated.get_data(as_text=True)


def _weeks() -> st.SearchStrategy[dict[str, str]]:
    """``week=YYYY-Www`` with a week every ISO year has (01–52), over the accepted years."""
    return st.builds(
        lambda year, week: {"week": f"{year}-W{week:02d}"},
        st.integers(FIRST_DATE.year, LAST_DATE.year),
        st.integers(1, 52),
    )


def _ranges() -> st.SearchStrategy[dict[str, str]]:
    """``from`` ≤ ``to``, at most ``ULLAGE_MAX_TRIPS_DAYS`` days, inside the accepted dates."""

    def window(first: dt.date, days: int) -> dict[str, str]:
        last = min(first + dt.timedelta(days=days), LAST_DATE)
        return {"from": first.isoformat(), "to": last.isoformat()}

    return st.builds(window, st.dates(FIRST_DATE, LAST_DATE), st.integers(0, MAX_WINDOW_DAYS - 1))


def _positive_trips(context, case) -> bool:
    return (
        context.operation is not None
        and context.operation.label == TRIPS
        and case.meta is not None
        and case.meta.generation.mode == GenerationMode.POSITIVE
    )


def map_case(context, case):
    """Coverage phase: a positive trips case names a demo truck (its generated window is kept).

    The coverage phase's cases are fixed (boundary values of each parameter), not drawn, so the
    truck is picked from the generated code rather than at random.
    """
    if _positive_trips(context, case) and case.meta.phase.name == TestPhase.COVERAGE:
        generated = str(case.path_parameters.get("code", ""))
        case.path_parameters = {"code": DEMO_TRUCKS[len(generated) % len(DEMO_TRUCKS)]}
    return case


def flatmap_case(context, case):
    """Fuzzing phase: seven in eight positive trips cases get a demo truck and a valid window.

    JSON Schema cannot say which truck codes exist or that ``from`` ≤ ``to`` ≤ ``from`` + 91 days,
    so without this almost every generated trips request is a 404 or 422 (1 answer in 324 was a
    200 in an earlier run); the eighth keeps what was generated. Negative cases are left as
    generated. Schemathesis re-derives a case's mode after a hook changes it, so its checks still
    judge each case by what is actually sent.
    """
    if not _positive_trips(context, case) or case.meta.phase.name == TestPhase.COVERAGE:
        return st.just(case)

    def valid(code: str, query: dict[str, str]):
        case.path_parameters = {"code": code}
        case.query = query
        return case

    chosen = st.builds(valid, st.sampled_from(DEMO_TRUCKS), st.one_of(_weeks(), _ranges()))
    return st.integers(0, 7).flatmap(lambda draw: st.just(case) if draw == 7 else chosen)


@pytest.fixture
def api_schema(app, active_plans, tokens):
    served = app.test_client().get("/api/v1/openapi.json", headers={"Authorization": f"Bearer {tokens['admin']}"})
    assert served.status_code == 200
    loaded = schemathesis.openapi.from_dict(served.get_json(), config=fuzz_config(tokens["admin"]))
    loaded.app = app
    loaded.location = "/api/v1/openapi.json"
    loaded.hooks.register_hook_with_name(map_case, "map_case")
    loaded.hooks.register_hook_with_name(flatmap_case, "flatmap_case")
    return loaded


def _pytest9_nodeid_shim() -> None:
    """schemathesis 4.32's lazy fixture renames ``request.node._nodeid``, which pytest 9 no longer has.

    The renaming only decorates reports, so a read-through property is enough.
    """
    from _pytest.nodes import Node  # noqa: PLC0415

    if not hasattr(Node, "_nodeid"):
        Node._nodeid = property(
            lambda self: self.__dict__.get("_st_nodeid", self.nodeid),  # type: ignore[attr-defined]
            lambda self, value: self.__dict__.__setitem__("_st_nodeid", value),
        )


_pytest9_nodeid_shim()
schema = schemathesis.pytest.from_fixture("api_schema")


def _refuse_constant(name: str) -> float:
    raise AssertionError(f"non-finite number {name} in a JSON response")


def _no_non_finite(response) -> None:
    """No NaN/Infinity *token* in a JSON body (the word inside a string, e.g. an echoed field name, is fine)."""
    body = response.content or b""
    content_type = response.headers.get("Content-Type") or response.headers.get("content-type") or ""
    if isinstance(content_type, list):
        content_type = content_type[0] if content_type else ""
    if "json" in content_type and body:
        json.loads(body, parse_constant=_refuse_constant)


@schema.parametrize()
@settings(derandomize=True, deadline=None, database=None, suppress_health_check=list(HealthCheck))
def test_api(case, app):
    database = app.config["DATABASE_URL"].split(":", 1)[0].split("+", 1)[0]
    key = (database, case.operation.label)
    CASES[key] = CASES.get(key, 0) + 1
    response = case.call_and_validate()
    if case.operation.label == TRIPS and response.status_code == 200:
        TRIPS_OK[database] = TRIPS_OK.get(database, 0) + 1
    _no_non_finite(response)


def test_fuzz_report():
    """Print the cases and the trips 200 share per database (runs after the parametrized tests in file order)."""
    if not CASES:
        pytest.skip("test_api did not run in this session")
    for database in sorted({db for db, _ in CASES}):
        counts = {label: n for (db, label), n in CASES.items() if db == database}
        trips, ok = counts.get(TRIPS, 0), TRIPS_OK.get(database, 0)
        print(f"\nschemathesis on {database}: {sum(counts.values())} cases over {len(counts)} operations")
        for label, count in sorted(counts.items()):
            print(f"  {count:5d}  {label}")
        print(f"  trips: {ok} of {trips} cases answered 200 ({ok / max(trips, 1):.0%})")
        assert min(counts.values()) >= EXAMPLES, f"fewer than {EXAMPLES} cases for some operation on {database}"
        assert 3 * ok >= trips > 0, f"{database}: only {ok} of {trips} trips cases answered 200 (want ≥ 1/3)"
