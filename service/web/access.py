"""Sign-in for people: the token form, the session (a row on the server, its id in the signed
cookie), CSRF, sign-out (which deletes the row, so a copied cookie is refused too)."""

from __future__ import annotations

import datetime as dt
import hashlib
import hmac
import secrets
from functools import wraps
from pathlib import Path
from typing import Any
from urllib.parse import urlencode

from flask import (
    Flask,
    Response,
    g,
    redirect,
    render_template,
    request,
    send_from_directory,
    session,
    url_for,
)
from flask.sessions import SecureCookieSessionInterface

from service.auth import SESSION, Caller, allow, caller_from_token
from service.errors import Problem
from service.persistence import status_sessions
from service.persistence.db import get_session
from service.persistence.models import utcnow
from service.schedule import level_state
from service.web import bp, formatting, log, settings

HERE = Path(__file__).resolve().parent
SESSION_HOURS = 12
SESSION_LENGTH = dt.timedelta(hours=SESSION_HOURS)
MAX_TOKEN_CHARS = 200


def csrf_token() -> str:
    """This session's CSRF token (created on first use)."""
    token = session.get("csrf")
    if not isinstance(token, str) or not token:
        token = secrets.token_urlsafe(32)
        session["csrf"] = token
    return token


def check_csrf() -> None:
    sent = request.form.get("csrf", "")
    expected = session.get("csrf")
    if (
        not isinstance(expected, str)
        or not expected
        or not hmac.compare_digest(sent.encode("utf-8"), expected.encode("utf-8"))
    ):
        raise Problem(
            400,
            "The form had expired or did not come from this page. Reload the page and try again.",
            title="Form expired",
        )


class SessionCookie(SecureCookieSessionInterface):
    """Flask's signed cookie, ``Secure`` by ``ULLAGE_SECURE_COOKIES``: ``always``, ``never``, or
    ``auto`` (the default) — when this request came over HTTPS, as the server saw it or, behind
    ``ULLAGE_TRUSTED_PROXIES`` proxies, as the nearest of them says in ``X-Forwarded-Proto``."""

    def get_cookie_secure(self, app: Flask) -> bool:
        mode = app.config["ULLAGE_SETTINGS"].secure_cookies
        return mode == "always" or (mode == "auto" and request.is_secure)


def _digest(sid: str) -> str:
    return hashlib.sha256(sid.encode("utf-8")).hexdigest()


def signed_in() -> Caller | None:
    """The person signed in with this cookie, re-checked against the server's session row and the
    token row on every page; else ``None`` (signed out, expired, or the token revoked)."""
    sid = session.get("sid")
    if not isinstance(sid, str) or not sid:
        return None
    found = status_sessions.find(get_session(), _digest(sid))
    if found is None:
        _forget()
        return None
    row, token = found
    if utcnow() - row.created_at > SESSION_LENGTH or token.revoked_at is not None:
        _forget()
        return None
    return Caller(token.id, token.name, token.role)


def _forget() -> None:
    session.pop("sid", None)


def safe_next(target: str | None) -> str | None:
    """Only a path of this page may be a redirect target (no open redirect)."""
    if not target or len(target) > 400 or "\\" in target:
        return None
    if not (target == "/status" or target.startswith(("/status/", "/status?"))):
        return None
    if target.startswith("//") or any(ord(c) < 33 for c in target):
        return None
    if target.startswith(("/status/sign-in", "/status/sign-out", "/status/static")):
        return None
    return target.rstrip("?")


def page(view):  # type: ignore[no-untyped-def]
    """A page for signed-in people: otherwise 303 to the sign-in form."""

    @wraps(view)
    def wrapper(*args, **kwargs):  # type: ignore[no-untyped-def]
        caller = signed_in()
        if caller is None:
            query = urlencode({"next": request.full_path.rstrip("?")})
            return redirect(f"{url_for('status.sign_in')}?{query}", 303)
        g.caller = caller
        return view(*args, **kwargs)

    return wrapper


@bp.app_template_global()
def status_csrf() -> str:
    return csrf_token()


@bp.context_processor
def _template_values() -> dict[str, Any]:
    config = settings()
    return {
        "unit": config.quantity_unit,
        "currency": config.currency,
        "timezone": config.timezone,
        "caller": g.get("caller"),
        "fmt": formatting,
        "level_state": level_state,
    }


@bp.get("/static/<path:filename>")
@allow(SESSION)
def static(filename: str) -> Response:
    """The stylesheet (needed before sign-in too)."""
    return send_from_directory(HERE / "static", filename, max_age=0)


@bp.route("/sign-in", methods=["GET", "POST"])
@allow(SESSION)
def sign_in() -> Any:
    target = safe_next(request.values.get("next"))
    if request.method == "GET":
        return render_template("status_sign_in.html", next=target, error=None, already=signed_in())
    check_csrf()
    token = request.form.get("token", "").strip()
    caller = caller_from_token(token) if token and len(token) <= MAX_TOKEN_CHARS else None
    if caller is None:
        log.info("status page: sign-in refused")
        return render_template(
            "status_sign_in.html", next=target, already=None, error="That token is not valid or has been revoked."
        ), 401
    db = get_session()
    if isinstance(session.get("sid"), str):
        status_sessions.end(db, _digest(session["sid"]))  # signing in again ends the earlier session
    status_sessions.purge_started_before(db, utcnow() - SESSION_LENGTH)
    sid = secrets.token_urlsafe(32)
    status_sessions.add(db, caller.token_id, _digest(sid))
    db.commit()
    session.clear()
    session.update(sid=sid, csrf=secrets.token_urlsafe(32))
    g.caller = caller
    return redirect(target or url_for("status.overview"), 303)


@bp.route("/sign-out", methods=["GET", "POST"])
@allow(SESSION)
def sign_out() -> Any:
    if request.method == "GET":
        return render_template("status_sign_out.html", already=signed_in())
    check_csrf()
    if isinstance(session.get("sid"), str):
        db = get_session()
        status_sessions.end(db, _digest(session["sid"]))  # a copy of the cookie stops working too
        db.commit()
    session.clear()
    return redirect(url_for("status.sign_in"), 303)
