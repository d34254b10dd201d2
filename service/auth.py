"""Bearer-token authentication and the per-route role rules.

Tokens look like ``ull_<43 url-safe characters>`` (256 random bits, Python ``secrets``). Only the
SHA-256 of the whole token is stored and tokens are looked up by that hash on a unique index, so no
secret is compared in Python. A valid token's caller is kept per process for at most
``ULLAGE_TOKEN_CACHE_SECONDS`` (default 2, at most 5; 0 looks every request up): a revocation is
refused in every worker within that time (docs/reliability.md, "Access": a revocation must not
wait for a worker's restart, so the cache lives at most 5 s). Unknown and revoked tokens are never cached, so a new token works at once.

Every route declares who may call it with :func:`allow` (or :data:`EXTRA_RULES` for routes that
libraries register). A route without a rule is refused (default deny) and the role-matrix test
fails on it.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import secrets
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, TypeVar

from flask import Flask, current_app, g, request

from service.cache import LruCache
from service.errors import Problem
from service.persistence import tokens
from service.persistence.db import write_intent
from service.persistence.models import ROLES, utcnow
from service.request_db import read_engine, rollback_request_session

PUBLIC = "public"
SESSION = "session"  # the status page signs people in with its own cookie (service.web)
TOKEN_PREFIX = "ull_"
LAST_USED_RESOLUTION = dt.timedelta(minutes=1)
TOKEN_CACHE_SIZE = 1024
_clock = time.monotonic  # the token cache's clock (tests move it instead of sleeping)

F = TypeVar("F", bound=Callable[..., object])

#: Rules for endpoints that are not ours to decorate.
EXTRA_RULES = {"api-docs.openapi_json": "viewer"}


@dataclass(frozen=True)
class Caller:
    """Who is calling: the token's id, name and role."""

    token_id: int
    name: str
    role: str

    def has(self, role: str) -> bool:
        return ROLES.index(self.role) >= ROLES.index(role)


def allow(role: str) -> Callable[[F], F]:
    """Declare the least role (or ``PUBLIC`` / ``SESSION``) a view needs."""
    if role not in (*ROLES, PUBLIC, SESSION):
        raise ValueError(f"unknown role {role!r}")

    def mark(view: F) -> F:
        view._ullage_role = role  # type: ignore[attr-defined]
        return view

    return mark


def new_token() -> str:
    """A fresh secret token."""
    return TOKEN_PREFIX + secrets.token_urlsafe(32)


def token_hash(token: str) -> str:
    """The stored form of a token."""
    return hashlib.sha256(token.encode("utf-8")).hexdigest()


def handler_for(app: Flask, endpoint: str, method: str) -> Any:
    """The function that answers ``method`` on ``endpoint``: the view, or its MethodView method."""
    view = app.view_functions.get(endpoint)
    view_class = getattr(view, "view_class", None)
    if view_class is None:
        return view
    return getattr(view_class, "get" if method == "HEAD" else method.lower(), None)


def rule_for(app: Flask, endpoint: str, method: str) -> str | None:
    """The declared rule of ``endpoint`` for ``method`` (``None`` if there is none)."""
    if endpoint in EXTRA_RULES:
        return EXTRA_RULES[endpoint]
    return getattr(handler_for(app, endpoint, method), "_ullage_role", None)


def _declared_rule(endpoint: str, method: str) -> str | None:
    """:func:`rule_for`, remembered per app (the routes do not change once requests arrive)."""
    rules: dict[tuple[str, str], str | None] = current_app.extensions["ullage.route_rules"]
    key = (endpoint, method)
    if key not in rules:
        rules[key] = rule_for(current_app, endpoint, method)
    return rules[key]


def caller_from_token(token: str) -> Caller | None:
    """The caller of a presented token; ``None`` when unknown or revoked.

    A cached caller younger than ``token_cache_seconds`` answers at once; otherwise the token is
    looked up, and its last use noted (at most once a minute).
    """
    digest = token_hash(token)
    cache: LruCache[tuple[Caller, float]] = current_app.extensions["ullage.token_cache"]
    now = _clock()
    hit = cache.get(digest)
    if hit is not None and hit[1] > now:
        return hit[0]
    row = tokens.by_hash(read_engine(), digest)
    caller = None if row is None or row.revoked_at is not None else Caller(row.id, row.name, row.role)
    if row is not None and caller is not None:
        if row.last_used_at is None or utcnow() - row.last_used_at > LAST_USED_RESOLUTION:
            g.touch_token = row.id
        ttl = current_app.config["ULLAGE_SETTINGS"].token_cache_seconds
        if ttl > 0:
            cache.put(digest, (caller, now + ttl))
    return caller


def _presented_token() -> str | None:
    header = request.headers.get("Authorization", "")
    scheme, _, value = header.partition(" ")
    if scheme.lower() != "bearer" or not value.strip():
        return None
    return value.strip()


def authenticate() -> None:
    """``before_request``: enforce the route's rule for bearer-token routes."""
    if request.endpoint is None or request.method == "OPTIONS":
        return
    rule = _declared_rule(request.endpoint, request.method)
    if rule in (PUBLIC, SESSION):
        return
    if rule is None:
        raise Problem(403, "This route has no access rule; it is refused.", kind="forbidden")
    if any(k in request.args for k in ("token", "access_token", "api_key")):
        raise Problem(
            401,
            "Tokens are accepted only in the Authorization header, never in the URL.",
            kind="unauthenticated",
            headers={"WWW-Authenticate": 'Bearer realm="ullage", error="invalid_request"'},
        )
    token = _presented_token()
    if token is None:
        raise Problem(
            401,
            "Send 'Authorization: Bearer <token>'.",
            kind="unauthenticated",
            headers={"WWW-Authenticate": 'Bearer realm="ullage"'},
        )
    caller = caller_from_token(token)
    if caller is None:
        raise Problem(
            401,
            "The token is not valid or has been revoked.",
            kind="unauthenticated",
            headers={"WWW-Authenticate": 'Bearer realm="ullage", error="invalid_token"'},
        )
    g.caller = caller
    if not caller.has(rule):
        raise Problem(
            403, f"This needs the {rule} role or higher; the token has the {caller.role} role.", kind="forbidden"
        )


def note_token_use(response):  # type: ignore[no-untyped-def]
    """``after_request``: record ``last_used_at`` at most once a minute per token (own transaction)."""
    token_id = g.pop("touch_token", None)
    if token_id is not None and response.status_code < 500:
        # The view has committed what it meant to; anything still open (an error path) is abandoned
        # anyway. Ending it first matters on SQLite, where an open BEGIN IMMEDIATE would make the
        # write below wait out busy_timeout (5 s) and fail; a dead connection must not make a 500.
        rollback_request_session()
        intent = write_intent.set(True)
        session = current_app.extensions["ullage.sessionmaker"]()
        try:
            tokens.note_use(session, token_id)
            session.commit()
        except Exception:  # noqa: BLE001 - a missed "last used" note must not fail the request
            session.rollback()
        finally:
            session.close()
            write_intent.reset(intent)
    return response


def current_caller() -> Caller:
    """The authenticated caller of this request."""
    return g.caller


def init_app(app: Flask) -> None:
    app.extensions["ullage.token_cache"] = LruCache(TOKEN_CACHE_SIZE)
    app.extensions["ullage.route_rules"] = {}
    app.before_request(authenticate)
    app.after_request(note_token_use)
