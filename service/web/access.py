"""Sign-in for people: the token form, the signed session cookie, CSRF, sign-out."""

from __future__ import annotations

import hmac
import secrets
import time
from functools import wraps
from pathlib import Path
from typing import Any
from urllib.parse import urlencode

from flask import Response, g, redirect, render_template, request, send_from_directory, session, url_for

from service.auth import SESSION, Caller, allow, caller_from_token
from service.errors import Problem
from service.persistence.db import get_session
from service.persistence.models import Token
from service.web import bp, formatting, log, settings

HERE = Path(__file__).resolve().parent
SESSION_HOURS = 12
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


def signed_in() -> Caller | None:
    """The person signed in with this cookie, re-checked against the token row; else ``None``."""
    token_id, name, at = session.get("uid"), session.get("name"), session.get("at")
    if not isinstance(token_id, int) or not isinstance(name, str) or not isinstance(at, (int, float)):
        return None
    if time.time() - at > SESSION_HOURS * 3600:
        _forget()
        return None
    row = get_session().get(Token, token_id)
    if row is None or row.revoked_at is not None or row.name != name:
        _forget()
        return None
    return Caller(row.id, row.name, row.role)


def _forget() -> None:
    for key in ("uid", "name", "role", "at"):
        session.pop(key, None)


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
    return {"unit": config.quantity_unit, "currency": config.currency, "caller": g.get("caller"), "fmt": formatting}


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
    session.clear()
    session.update(
        uid=caller.token_id, name=caller.name, role=caller.role, at=int(time.time()), csrf=secrets.token_urlsafe(32)
    )
    g.caller = caller
    return redirect(target or url_for("status.overview"), 303)


@bp.route("/sign-out", methods=["GET", "POST"])
@allow(SESSION)
def sign_out() -> Any:
    if request.method == "GET":
        return render_template("status_sign_out.html", already=signed_in())
    check_csrf()
    session.clear()
    return redirect(url_for("status.sign_in"), 303)
