"""Property-based fuzzing of every API operation with schemathesis, in-process through the WSGI app.

* The app's own OpenAPI document (``/api/v1/openapi.json``; reading it needs a viewer token, an
  admin token is used), every operation, authenticated as admin.
* Fixed seed (``derandomize=True``), at least 100 examples per operation, positive **and** negative
  data (schemathesis' default modes), **all** checks: not_a_server_error, status_code_conformance,
  content_type_conformance, response_headers_conformance, response_schema_conformance,
  negative_data_rejection, positive_data_acceptance, missing_required_header, unsupported_method, …
* On top: no ``NaN``/``Infinity`` in any response body.

One database is enough for fuzzing: SQLite (the request handling under test is the same on both;
the database-specific behaviour is covered by the concurrency and fault tests).
"""

from __future__ import annotations

import json
import shutil

import pytest
import schemathesis
from hypothesis import HealthCheck, settings

EXAMPLES = 100
#: Counts the cases run, per operation, for the report printed at the end.
CASES: dict[str, int] = {}


@pytest.fixture
def database_url(tmp_path, sqlite_template):  # one database is enough for fuzzing: SQLite
    path = tmp_path / "fuzz.db"
    shutil.copy(sqlite_template, path)
    return f"sqlite:///{path}"


#: ``positive_data_acceptance`` expects 2xx/3xx/401/403/404/409/429 for a schema-valid request.
#: These operations also answer a documented status to a request that is schema-valid but refused
#: on grounds JSON Schema cannot state; each entry gives the reason. No check is switched off.
POSITIVE_ALSO = {
    # A generated If-Match can never equal the row's current ETag: refusing it is the whole point.
    "DELETE /api/v1/sites/{code}": (412,),
    "PATCH /api/v1/trucks/{code}": (412,),
    "DELETE /api/v1/trucks/{code}": (412,),
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
    "POST /api/v1/sites": (422,),
    "PATCH /api/v1/sites/{code}": (412, 422),
    # Some YYYY-W53 do not exist (2025-W53); `week` and `from`/`to` exclude each other; from ≤ to,
    # at most 92 days.
    "GET /api/v1/trucks/{code}/trips": (422,),
    # The body is documented as text/csv (a string): its header row and columns cannot be stated in
    # JSON Schema, so an arbitrary string is schema-valid yet not a sites CSV.
    "POST /api/v1/sites/import": (422,),
}
DEFAULT_POSITIVE = ["2xx", "3xx", "401", "403", "404", "409", "429"]
#: ``missing_required_header`` expects 400/401/403/406/415/422; a missing If-Match is answered
#: 428 Precondition Required, the status RFC 6585 §3 defines for exactly that.
IF_MATCH_OPERATIONS = (
    "PATCH /api/v1/sites/{code}",
    "DELETE /api/v1/sites/{code}",
    "PATCH /api/v1/trucks/{code}",
    "DELETE /api/v1/trucks/{code}",
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
    # The token goes through schemathesis' own auth config (scheme "bearer" of the document), so it
    # knows the Authorization header is supplied and its ignored_auth check can test it honestly.
    return schemathesis.Config.from_dict({"operations": operations, "auth": {"openapi": {"bearer": {"bearer": token}}}})


@pytest.fixture
def api_schema(app, demo, tokens):
    return schemathesis.openapi.from_wsgi(
        "/api/v1/openapi.json",
        app,
        config=fuzz_config(tokens["admin"]),
        headers={"Authorization": f"Bearer {tokens['admin']}"},
    )


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
@settings(
    max_examples=EXAMPLES, derandomize=True, deadline=None, database=None, suppress_health_check=list(HealthCheck)
)
def test_api(case, app):
    CASES[case.operation.label] = CASES.get(case.operation.label, 0) + 1
    response = case.call_and_validate()
    _no_non_finite(response)


def test_fuzz_report():
    """Print the number of cases (runs after the parametrized tests in file order)."""
    if not CASES:
        pytest.skip("test_api did not run in this session")
    total = sum(CASES.values())
    print(f"\nschemathesis: {total} cases over {len(CASES)} operations")
    for label, count in sorted(CASES.items()):
        print(f"  {count:5d}  {label}")
    assert min(CASES.values()) >= EXAMPLES, "fewer than 100 cases for some operation"
