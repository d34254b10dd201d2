"""One error shape everywhere: RFC 9457 ``application/problem+json``.

Members: ``type``, ``title``, ``status``, ``detail``, ``instance``, and for validation ``errors``:
a list of ``{pointer, detail}`` where ``pointer`` is a JSON Pointer (RFC 6901) into the request
body, or ``#/query/<name>`` / ``#/header/<name>`` for other locations.
Stack traces, versions and connection strings never reach a client.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Mapping
from http import HTTPStatus
from typing import Any

from flask import Flask, Response, g, json, request
from sqlalchemy.exc import DBAPIError, IntegrityError, OperationalError
from werkzeug.exceptions import HTTPException

from service.persistence.repository import NotFound
from service.planning import PlanningInputError
from service.request_db import rollback_request_session

PROBLEM_JSON = "application/problem+json"
#: One scheme for every problem ``type``: ``PROBLEM_BASE + kind``. An ``https`` URI, as RFC 9457's
#: own examples use, under the ``.invalid`` top-level domain that RFC 2606 §2 reserves so that it can
#: never resolve: the type is an identifier to compare, never a page to fetch (RFC 9457 §3.1.1: clients
#: "SHOULD NOT automatically dereference" it), and no one else can ever serve a page under that name.
#: Each type is documented in README.md ("Problem types"), which a test checks against this table.
PROBLEM_BASE = "https://ullage.invalid/problems/"

#: Every problem kind the service answers with, and what it means.
PROBLEM_TYPES: dict[str, str] = {
    "bad-request": "The request cannot be read (a malformed header or query).",
    "invalid-json": "The body is not JSON the service can read (malformed, nested too deeply, a huge number).",
    "bad-idempotency-key": "The Idempotency-Key header is not 1–255 visible ASCII characters.",
    "unauthenticated": "No token, an unknown or revoked token, or a token in the URL (401).",
    "forbidden": "The token's role may not use this route (403).",
    "not-found": "Nothing at this path: no such truck, site, plan or route (404).",
    "method-not-allowed": "The route does not take this method; `Allow` lists those it takes (405).",
    "not-acceptable": "The service cannot answer in a media type the request accepts (406).",
    "conflict": "The change conflicts with stored data: a code that exists, or rows that still reference it (409).",
    "idempotency-in-progress": "A request with this Idempotency-Key is still running; retry after `Retry-After` (409).",
    "idempotency-key-reused": "This Idempotency-Key was used with another body; use a new key (422).",
    "no-active-plan": "The truck has no active plan to take trips from (409).",
    "inputs-changed": "Trucks or sites changed since the network plan was computed; `sites` and `trucks` name them (409).",
    "no-weather-region": "The site has no `weather_region`, so its consumption cannot be fitted to the weather (409).",
    "precondition-failed": "If-Match names an ETag that is no longer current: GET again and retry (412).",
    "precondition-required": "The change needs If-Match with the ETag of your last read (428).",
    "bad-etag": "An entity tag in If-Match or If-None-Match is not quoted (400).",
    "too-large": "The body is larger than the route accepts (413).",
    "too-many-rows": "A CSV import has more rows than one import takes (413).",
    "unsupported-media-type": "The body is not of the media type the route takes (415).",
    "validation": "A field, query parameter or CSV cell is not valid; `errors` points at each (422).",
    "no-sites": "The truck has no active sites to plan (422).",
    "no-estimate": "Too little data (readings, deliveries) to estimate a site's consumption (422).",
    "too-many-sites": "More sites than one calculation or plan takes (ULLAGE_MAX_PLAN_SITES) (422).",
    "planning-input": "Parameters the planner cannot plan, e.g. a tank that holds less than a day (422).",
    "infeasible": "No drivable plan keeps the truck calendar and the tank limits; `needed` says what would help (422).",
    "rate-limited": "Too many planning requests or heavy reads of this token this minute (429).",
    "internal": "Something went wrong in the service; nothing was recorded (500).",
    "database-unavailable": "The database is down or busy; nothing was recorded; retry after `Retry-After` (503).",
    "not-ready": "Readiness: the database is unreachable or not migrated (503).",
    "planning-busy": "Every planning process is busy and the queue is full (503).",
    "planning-time-limit": "The computation was stopped at the planning time limit (503).",
    "planning-failed": "The planning process failed; retry later (503).",
    "storage-full": "The database's storage is full; nothing was recorded (507).",
    "http-error": "Any other HTTP error; `title` is the status phrase.",
}

#: The kind of an HTTP error raised without one (werkzeug, webargs).
STATUS_KINDS: dict[int, str] = {
    400: "bad-request",
    401: "unauthenticated",
    403: "forbidden",
    404: "not-found",
    405: "method-not-allowed",
    406: "not-acceptable",
    409: "conflict",
    412: "precondition-failed",
    413: "too-large",
    415: "unsupported-media-type",
    422: "validation",
    428: "precondition-required",
    429: "rate-limited",
    500: "internal",
    503: "database-unavailable",
}
log = logging.getLogger("ullage.errors")


class Problem(Exception):
    """Raise to answer with a problem document."""

    def __init__(
        self,
        status: int,
        detail: str,
        *,
        kind: str | None = None,
        errors: Iterable[Mapping[str, str]] = (),
        headers: Mapping[str, str] | None = None,
        title: str | None = None,
        extensions: Mapping[str, Any] | None = None,
    ) -> None:
        super().__init__(detail)
        self.status = status
        self.detail = detail
        self.kind = kind
        self.errors = list(errors)
        self.headers = dict(headers or {})
        self.title = title
        #: Extension members of the problem type (RFC 9457 §3.2), e.g. ``needed`` of ``infeasible``.
        self.extensions = dict(extensions or {})


def problem_response(
    status: int,
    detail: str,
    *,
    kind: str | None = None,
    errors: Iterable[Mapping[str, str]] = (),
    headers: Mapping[str, str] | None = None,
    title: str | None = None,
    extensions: Mapping[str, Any] | None = None,
) -> Response:
    """Build a problem+json response.

    ``kind`` defaults to the status's (:data:`STATUS_KINDS`); ``extensions`` never replace a standard member.
    """
    kind = kind or STATUS_KINDS.get(status, "http-error")
    if kind not in PROBLEM_TYPES:
        log.error("undocumented problem kind %r", kind)
    body: dict[str, Any] = {
        "type": PROBLEM_BASE + kind,
        "title": title or HTTPStatus(status).phrase,
        "status": status,
        "detail": detail,
        "instance": request.path,
    }
    errors = list(errors)
    if errors:
        body["errors"] = errors
    for name, value in (extensions or {}).items():
        body.setdefault(name, value)
    # Issue 6: the request id goes into problem bodies too (an extension member; clients that do
    # not know it ignore it, RFC 9457 §3.2), besides the X-Request-ID header.
    request_id = g.get("request_id")
    if request_id:
        body["request_id"] = request_id
    response = Response(json.dumps(body), status=status, mimetype=PROBLEM_JSON)
    for name, value in (headers or {}).items():
        response.headers[name] = value
    return response


def _pointer(path: Iterable[Any]) -> str:
    parts = [str(p).replace("~", "~0").replace("/", "~1") for p in path]
    return "#/" + "/".join(parts) if parts else "#"


def flatten_messages(messages: Any, path: tuple[Any, ...] = ()) -> list[dict[str, str]]:
    """Turn marshmallow's nested ``{field: [msg]}`` into ``[{pointer, detail}]``."""
    out: list[dict[str, str]] = []
    if isinstance(messages, Mapping):
        for key, value in messages.items():
            if key == "_schema":
                out.extend(flatten_messages(value, path))
            else:
                out.extend(flatten_messages(value, (*path, key)))
    elif isinstance(messages, (list, tuple)) and messages and all(isinstance(m, str) for m in messages):
        out.extend({"pointer": _pointer(path), "detail": m} for m in messages)
    elif isinstance(messages, (list, tuple)):
        for value in messages:
            out.extend(flatten_messages(value, path))
    else:
        out.append({"pointer": _pointer(path), "detail": str(messages)})
    return out


def webargs_errors(messages: Mapping[str, Any]) -> list[dict[str, str]]:
    """webargs groups messages by location; the body is the root of the pointer."""
    out: list[dict[str, str]] = []
    for location, per_field in messages.items():
        prefix: tuple[str, ...] = () if location == "json" else (location,)
        out.extend(flatten_messages(per_field, prefix))
    return out


def handle_http_exception(error: HTTPException) -> Response:
    """Every werkzeug/webargs HTTP error as problem+json, keeping its headers (``Allow`` on 405)."""
    status = error.code or 500
    data = getattr(error, "data", None) or {}
    errors = webargs_errors(data["messages"]) if "messages" in data else []
    headers = {k: v for k, v in error.get_headers() if k.lower() != "content-type"}
    headers.update(data.get("headers") or {})
    kind = None
    if status == 400 and request.is_json:
        detail, kind = "The request body is not valid JSON.", "invalid-json"
    elif errors:
        listed = "; ".join(f"{e['pointer']}: {e['detail'].rstrip('.')}" for e in errors[:5])
        detail = f"The request is not valid: {listed}."
    else:
        detail = data.get("message") or error.description or HTTPStatus(status).phrase
    if status == 401:
        headers.setdefault("WWW-Authenticate", 'Bearer realm="ullage"')
    return problem_response(status, detail, kind=kind, errors=errors, headers=headers)


def handle_problem(error: Problem) -> Response:
    return problem_response(
        error.status,
        error.detail,
        kind=error.kind,
        errors=error.errors,
        headers=error.headers,
        title=error.title,
        extensions=error.extensions,
    )


def handle_not_found(error: NotFound) -> Response:
    """A truck, site, plan or token the request names does not exist: 404 naming it (mapped here only)."""
    return problem_response(404, str(error), kind="not-found")


def handle_planning_input(error: PlanningInputError) -> Response:
    """A planning input the core refuses (e.g. a tank that holds less than a day) → 422."""
    path = ("sites", error.index, error.field) if error.index is not None else (error.field,)
    return problem_response(
        422, str(error), kind="planning-input", errors=[{"pointer": _pointer(path), "detail": str(error)}]
    )


def handle_integrity(error: IntegrityError) -> Response:
    rollback_request_session()
    log.info("integrity error: %s", type(error.orig).__name__)
    return problem_response(409, "The change conflicts with data already stored.", kind="conflict")


def _storage_full(error: DBAPIError) -> bool:
    text = str(getattr(error, "orig", error)).lower()
    return "database or disk is full" in text or "no space left" in text or "disk full" in text


def _locked(error: DBAPIError) -> bool:
    return "database is locked" in str(getattr(error, "orig", error)).lower()


def handle_database(error: DBAPIError) -> Response:
    """Database unreachable, locked longer than busy_timeout, or full: 503 (507 when full) with
    Retry-After, logged as a warning (an outage is not a bug)."""
    rollback_request_session()
    if _storage_full(error):
        log.error("storage full: %s", type(error.orig).__name__)
        return problem_response(
            507, "The plan store is full; nothing was recorded.", kind="storage-full", headers={"Retry-After": "60"}
        )
    log.warning("database unavailable: %s", type(getattr(error, "orig", error)).__name__)
    return problem_response(
        503,
        "The database is busy with other changes; nothing was recorded. Retry shortly."
        if _locked(error)
        else "The database is not available right now; nothing was recorded. Retry shortly.",
        kind="database-unavailable",
        headers={"Retry-After": "2"},
    )


def handle_unexpected(error: Exception) -> Response:
    rollback_request_session()
    log.exception("unhandled error")
    return problem_response(500, "Something went wrong on our side; nothing was recorded.", kind="internal")


def init_app(app: Flask) -> None:
    """Register the handlers (flask-smorest's own HTTPException handler is replaced in service.api)."""
    app.register_error_handler(Problem, handle_problem)
    app.register_error_handler(NotFound, handle_not_found)
    app.register_error_handler(PlanningInputError, handle_planning_input)
    app.register_error_handler(IntegrityError, handle_integrity)
    app.register_error_handler(OperationalError, handle_database)
    app.register_error_handler(DBAPIError, handle_database)
    app.register_error_handler(HTTPException, handle_http_exception)
    app.register_error_handler(Exception, handle_unexpected)
