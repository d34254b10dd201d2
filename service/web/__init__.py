"""Dispatcher status page: server-rendered HTML under ``/status``.

Sign-in: a person pastes a viewer, dispatcher or admin token once into the form at
``/status/sign-in`` (HTTP Basic is not offered). The token is checked with
:func:`service.auth.caller_from_token`; the session is a row on the server
(``models.StatusSession``: the token's id, the sign-in time, the SHA-256 of a random session id)
and Flask's signed cookie (``HttpOnly``, ``SameSite=Strict``, ``Secure`` over HTTPS by
``ULLAGE_SECURE_COOKIES``; :class:`service.web.access.SessionCookie`) holds only that random id
and a CSRF token, never the token. Every page load looks the session row and its token up and
refuses them once the token is revoked. Sessions end after ``access.SESSION_HOURS`` hours or on
sign-out, which deletes the row: a copy of the cookie is refused from then on.

Every form carries a per-session random CSRF token in a hidden field, compared with
:func:`hmac.compare_digest`. Every response of this blueprint gets a strict CSP (no inline script
or style, nothing from elsewhere), ``nosniff`` and ``no-store``. Errors are small HTML pages.
The data comes from :mod:`service.schedule`, the same module the weekly trips call uses.

Modules: this one (blueprint, headers, error pages), :mod:`service.web.access` (sign-in, session,
CSRF), :mod:`service.web.pages` (overview and site pages), :mod:`service.web.morning` (latest
readings, lowest first, load sheets), :mod:`service.web.chart` (SVG),
:mod:`service.web.network_plans` (the overview's latest network plans and their progress),
:mod:`service.web.formatting` (numbers and dates for people).
"""

from __future__ import annotations

import logging
from typing import Any

from flask import Blueprint, Flask, Response, current_app, render_template
from sqlalchemy.exc import DBAPIError
from werkzeug.exceptions import HTTPException

from service.errors import Problem
from service.request_db import rollback_request_session

PAGE_HEADERS = {
    "Content-Security-Policy": "default-src 'none'; style-src 'self'; img-src 'self'; form-action 'self'; "
    "frame-ancestors 'none'; base-uri 'none'",
    "X-Content-Type-Options": "nosniff",
    "Cache-Control": "no-store",
    "Referrer-Policy": "no-referrer",
}

log = logging.getLogger("ullage.web")
bp = Blueprint("status", __name__, url_prefix="/status", template_folder="templates")


def settings() -> Any:
    return current_app.config["ULLAGE_SETTINGS"]


@bp.after_request
def _page_headers(response: Response) -> Response:
    for name, value in PAGE_HEADERS.items():
        response.headers[name] = value
    return response


def error_page(status: int, title: str, message: str) -> tuple[str, int]:
    return render_template("status_error.html", status=status, title=title, message=message), status


@bp.errorhandler(HTTPException)
def _http_error(error: HTTPException) -> tuple[str, int]:
    status = error.code or 500
    messages = {
        404: "There is no such page or site.",
        405: "This page does not accept that kind of request.",
        413: "The form was too large.",
    }
    return error_page(status, error.name, messages.get(status, error.description or error.name))


@bp.errorhandler(Problem)
def _problem(error: Problem) -> tuple[str, int, dict[str, str]]:
    return (*error_page(error.status, error.title or "Error", error.detail), error.headers)


@bp.errorhandler(Exception)
def _unexpected(error: Exception) -> tuple[str, int]:
    rollback_request_session()
    if isinstance(error, DBAPIError):
        log.warning("status page: database unavailable: %s", type(getattr(error, "orig", error)).__name__)
        return error_page(503, "Database unavailable", "The database is not available right now. Try again shortly.")
    log.exception("status page: unhandled error")
    return error_page(500, "Something went wrong", "Something went wrong on our side.")


def init_app(app: Flask) -> None:
    """Register the status page (its routes live in access.py and pages.py)."""
    from service.web import access, morning, pages  # noqa: F401, PLC0415 - importing registers the routes

    app.session_interface = access.SessionCookie()
    app.register_blueprint(bp)
