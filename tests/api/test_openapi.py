"""GET /api/v1/openapi.json: valid OpenAPI 3.1, problem+json errors, idempotency rules, issue 4 routes."""

from __future__ import annotations

import re

import pytest
from openapi_spec_validator import validate

ROUTES = {
    ("/api/v1/calculations/cycle", "post"),
    ("/api/v1/calculations/joint", "post"),
    ("/api/v1/trucks/{code}/plans", "post"),
    ("/api/v1/trucks/{code}/plans", "get"),
    ("/api/v1/plans/{plan_id}", "get"),
    ("/api/v1/plans/{plan_id}/activate", "post"),
    ("/api/v1/trucks/{code}/trips", "get"),
    ("/api/v1/sites/{code}/readings", "post"),
    ("/api/v1/sites/{code}/readings", "get"),
}


@pytest.fixture
def spec(client, auth):
    response = client.get("/api/v1/openapi.json", headers=auth("viewer"))
    assert response.status_code == 200
    assert response.mimetype == "application/json"
    return response.get_json()


def _resolve(spec, obj):
    while "$ref" in obj:
        node = spec
        for part in obj["$ref"].removeprefix("#/").split("/"):
            node = node[part]
        obj = node
    return obj


def test_valid_openapi_3_1(spec):
    assert spec["openapi"].startswith("3.1")
    validate(spec)  # raises on an invalid document


def test_issue_4_routes_present(spec):
    present = {(path, method) for path, item in spec["paths"].items() for method in item}
    assert ROUTES <= present, ROUTES - present


def _error_responses(spec, paths):
    for path in paths:
        for method, operation in spec["paths"][path].items():
            if not isinstance(operation, dict) or "responses" not in operation:
                continue
            for status, response in operation["responses"].items():
                if status == "default" or int(status) >= 400:
                    yield (path, method, status), set(_resolve(spec, response).get("content", {}))


def test_issue_4_error_responses_are_problem_json(spec):
    issue4 = sorted({path for path, _method in ROUTES})
    found = dict(_error_responses(spec, issue4))
    assert len(found) > 15
    assert {where: types for where, types in found.items() if types != {"application/problem+json"}} == {}


def test_every_error_response_is_problem_json(spec):
    found = dict(_error_responses(spec, spec["paths"]))
    assert {where: types for where, types in found.items() if types != {"application/problem+json"}} == {}


def test_issue_4_error_statuses_documented(spec):
    def statuses(path, method):
        return set(spec["paths"][path][method]["responses"])

    assert {"201", "409", "422"} <= statuses("/api/v1/trucks/{code}/plans", "post")
    assert {"200", "304", "409", "422"} <= statuses("/api/v1/trucks/{code}/trips", "get")
    assert "422" in statuses("/api/v1/calculations/cycle", "post")
    assert "422" in statuses("/api/v1/calculations/joint", "post")
    assert "422" in statuses("/api/v1/sites/{code}/readings", "post")


def test_idempotency_rules_described(spec):
    operation = spec["paths"]["/api/v1/trucks/{code}/plans"]["post"]
    header = next(
        p
        for p in (_resolve(spec, p) for p in operation.get("parameters", []))
        if p["in"] == "header" and p["name"] == "Idempotency-Key"
    )
    assert header["required"] is False
    text = spec["info"]["description"] + header.get("description", "")
    for words in ("Idempotency-Key", "24 hours", "token", "422", "409", "Ullage-Replayed"):
        assert words in text, words


# --- issue 18: the integrator's contract ------------------------------------------------------------


def _operations(spec):
    for path, item in spec["paths"].items():
        for method, operation in item.items():
            if method in {"get", "post", "put", "patch", "delete"}:
                yield path, method, operation


def _response_headers(spec, operation, status):
    return set(_resolve(spec, operation["responses"][status]).get("headers", {}))


def _header_parameters(spec, operation):
    return {
        p["name"]: p for p in (_resolve(spec, p) for p in operation.get("parameters", [])) if p["in"] == "header"
    }


def test_every_operation_has_a_summary_and_a_description(spec):
    missing = [
        f"{method.upper()} {path}"
        for path, method, operation in _operations(spec)
        if not operation.get("summary", "").strip() or len(operation.get("description", "").strip()) < 40
    ]
    assert len(list(_operations(spec))) >= 22
    assert missing == []


#: (path, method, status) → response headers the operation sends and clients rely on.
RESPONSE_HEADERS = {
    ("/api/v1/trucks", "get", "200"): {"Link"},
    ("/api/v1/trucks", "post", "201"): {"Location", "ETag"},
    ("/api/v1/trucks/{code}", "get", "200"): {"ETag"},
    ("/api/v1/trucks/{code}", "get", "304"): {"ETag"},
    ("/api/v1/trucks/{code}", "patch", "200"): {"ETag"},
    ("/api/v1/trucks/{code}", "patch", "412"): {"ETag"},
    ("/api/v1/sites", "get", "200"): {"Link"},
    ("/api/v1/sites", "post", "201"): {"Location", "ETag"},
    ("/api/v1/sites/{code}", "get", "200"): {"ETag"},
    ("/api/v1/sites/{code}", "get", "304"): {"ETag"},
    ("/api/v1/sites/{code}", "patch", "200"): {"ETag"},
    ("/api/v1/sites/{code}", "patch", "412"): {"ETag"},
    ("/api/v1/calculations/joint", "post", "429"): {"Retry-After"},
    ("/api/v1/calculations/joint", "post", "503"): {"Retry-After"},
    ("/api/v1/trucks/{code}/plans", "get", "200"): {"Link"},
    ("/api/v1/trucks/{code}/plans", "post", "201"): {"Location", "Ullage-Replayed"},
    ("/api/v1/trucks/{code}/plans", "post", "409"): {"Retry-After"},
    ("/api/v1/trucks/{code}/plans", "post", "429"): {"Retry-After"},
    ("/api/v1/trucks/{code}/plans", "post", "503"): {"Retry-After"},
    ("/api/v1/plans/{plan_id}", "get", "200"): {"ETag"},
    ("/api/v1/plans/{plan_id}", "get", "304"): {"ETag"},
    ("/api/v1/plans/{plan_id}/activate", "post", "200"): {"ETag"},
    ("/api/v1/trucks/{code}/trips", "get", "200"): {"ETag"},
    ("/api/v1/trucks/{code}/trips", "get", "304"): {"ETag"},
    ("/api/v1/trucks/{code}/trips", "get", "429"): {"Retry-After"},
    ("/api/v1/trucks/{code}/trips", "get", "503"): {"Retry-After"},
    ("/api/v1/sites/{code}/readings", "get", "200"): {"Link"},
    ("/api/v1/sites/{code}/readings", "post", "201"): {"Location"},
}


@pytest.mark.parametrize(("path", "method", "status"), sorted(RESPONSE_HEADERS))
def test_response_headers_are_declared(spec, path, method, status):
    operation = spec["paths"][path][method]
    assert status in operation["responses"]
    declared = _response_headers(spec, operation, status)
    assert RESPONSE_HEADERS[(path, method, status)] <= declared
    for name in declared:
        header = _resolve(spec, operation["responses"][status])["headers"][name]
        assert header["schema"]["type"] == "string" and header["description"]


def test_every_error_may_carry_retry_after(spec):
    """Any route may meet a database outage: 503 with Retry-After (the default error response)."""
    default = _resolve(spec, spec["components"]["responses"]["DEFAULT_ERROR"])
    assert "Retry-After" in default["headers"]


def test_the_replay_header_is_our_own_name(spec):
    text = str(spec)
    assert "Ullage-Replayed" in text
    assert "Idempotent-Replayed" not in text


#: (path, method) → request headers accepted there, and whether each is required.
REQUEST_HEADERS = {
    ("/api/v1/trucks/{code}", "get"): {"If-None-Match": False},
    ("/api/v1/trucks/{code}", "patch"): {"If-Match": True},
    ("/api/v1/trucks/{code}", "delete"): {"If-Match": True},
    ("/api/v1/sites/{code}", "get"): {"If-None-Match": False},
    ("/api/v1/sites/{code}", "patch"): {"If-Match": True},
    ("/api/v1/sites/{code}", "delete"): {"If-Match": True},
    ("/api/v1/trucks/{code}/plans", "post"): {"Idempotency-Key": False},
    ("/api/v1/plans/{plan_id}", "get"): {"If-None-Match": False},
    ("/api/v1/plans/{plan_id}/activate", "post"): {"If-Match": False},
    ("/api/v1/trucks/{code}/trips", "get"): {"If-None-Match": False},
}


@pytest.mark.parametrize(("path", "method"), sorted(REQUEST_HEADERS))
def test_request_headers_are_parameters(spec, path, method):
    operation = spec["paths"][path][method]
    declared = _header_parameters(spec, operation)
    assert {name: declared[name]["required"] for name in REQUEST_HEADERS[(path, method)]} == REQUEST_HEADERS[
        (path, method)
    ]
    if path.endswith("/trips"):  # added to the query parameters, not instead of them
        names = {p["name"] for p in operation["parameters"]}
        assert {"week", "from", "to", "If-None-Match"} <= names


def test_etag_parameters_state_the_quotes(spec):
    from service.api.http_headers import QUOTED_TAGS  # noqa: PLC0415

    pattern = re.compile(QUOTED_TAGS)
    assert pattern.match('"abc"') and pattern.match('W/"a", "b"')
    assert not pattern.match("abc") and not pattern.match("*")
    patch = _header_parameters(spec, spec["paths"]["/api/v1/sites/{code}"]["patch"])
    assert patch["If-Match"]["schema"]["pattern"] == QUOTED_TAGS


def _schema(spec, name):
    return spec["components"]["schemas"][name]


def test_non_obvious_fields_are_described(spec):
    stop = _schema(spec, "DatedStop")["properties"]
    assert "delivery time" in stop["projected_level_before"]["description"]
    assert "reading" in stop["quantity"]["description"]
    assert stop["planned_quantity"]["description"]
    notice = _schema(spec, "Notice")["properties"]
    assert "safety-stock crossing" in notice["date"]["description"]
    assert "not the day the tank runs empty" in notice["date"]["description"]


def test_notice_kinds_and_problem_types_are_enums(spec):
    from service.api.schemas.plans import NOTICE_KINDS  # noqa: PLC0415
    from service.errors import PROBLEM_BASE, PROBLEM_TYPES  # noqa: PLC0415

    assert set(_schema(spec, "Notice")["properties"]["kind"]["enum"]) == set(NOTICE_KINDS)
    assert set(_schema(spec, "Problem")["properties"]["type"]["enum"]) == {PROBLEM_BASE + k for k in PROBLEM_TYPES}


def test_csv_columns_are_documented(spec):
    from service.api.sites_csv import COLUMNS, REQUIRED  # noqa: PLC0415

    body = spec["paths"]["/api/v1/sites/import"]["post"]["requestBody"]
    assert set(body["content"]) == {"text/csv"}
    export = spec["paths"]["/api/v1/sites/export"]["get"]["responses"]["200"]["content"]["text/csv"]
    for text in (body["description"], export["schema"]["description"]):
        for column in (*COLUMNS, "unit"):
            assert f"`{column}`" in text, column
    assert body["content"]["text/csv"]["example"].startswith(",".join(COLUMNS))
    assert export["example"].splitlines()[0] == ",".join(COLUMNS)
    assert set(REQUIRED) < set(COLUMNS)


def test_openapi_needs_a_viewer_token(client):
    response = client.get("/api/v1/openapi.json")
    assert response.status_code == 401
    assert response.mimetype == "application/problem+json"


def test_no_ui_loading_assets_from_the_internet(client, auth):
    for path in ("/api/v1/swagger-ui", "/api/v1/redoc", "/api/v1/rapidoc"):
        response = client.get(path, headers=auth("viewer"))
        if response.status_code == 200:
            assert b"https://" not in response.get_data() and b"//cdn" not in response.get_data(), path


def _body_schema(spec, path, method, status=None):
    operation = spec["paths"][path][method]
    part = operation["requestBody"] if status is None else operation["responses"][status]
    return _resolve(spec, _resolve(spec, part)["content"]["application/json"]["schema"])


def test_issue_13_calendar_fields_and_statuses_are_described(spec):
    calendar = {"working_days", "trips_per_day", "closed_dates", "holiday_region"}
    for path, method in (("/api/v1/trucks", "post"), ("/api/v1/calculations/joint", "post")):
        properties = _body_schema(spec, path, method)["properties"]
        assert calendar <= set(properties), (path, calendar - set(properties))
        for name in calendar:
            assert properties[name].get("description"), (path, name)
        assert properties["trips_per_day"]["minimum"] == 1 and properties["trips_per_day"]["maximum"] == 24
        assert properties["working_days"]["items"]["minimum"] == 1
        assert properties["working_days"]["items"]["maximum"] == 7
        assert properties["closed_dates"]["maxItems"] == 1000
        assert properties["working_days"]["uniqueItems"] and properties["closed_dates"]["uniqueItems"]
    assert "start_date" in _body_schema(spec, "/api/v1/calculations/joint", "post")["properties"]
    result = _body_schema(spec, "/api/v1/calculations/joint", "post", "200")["properties"]
    assert set(result["status"]["enum"]) == {"optimal", "feasible", "infeasible", "time_limit"}
    assert {"start_date", "needed"} <= set(result) and "extra_trips" not in result
    trip = _resolve(spec, result["trips"]["items"])["properties"]
    assert {"date", "trip"} <= set(trip)
    trips = _body_schema(spec, "/api/v1/trucks/{code}/trips", "get", "200")["properties"]
    notice = _resolve(spec, trips["warnings"]["items"])["properties"]
    assert "calendar" in notice["kind"]["enum"]


def test_issue_13_holiday_regions_are_the_installed_packages(spec):
    import holidays  # noqa: PLC0415

    region = _body_schema(spec, "/api/v1/trucks", "post")["properties"]["holiday_region"]
    supported = holidays.list_supported_countries(include_aliases=False)
    assert {"GB", "GB-SCT", "US-NY", "DE-BY", None} <= set(region["enum"])
    assert {c for c in region["enum"] if c and "-" not in c} == {c for c in supported if len(c) == 2}
