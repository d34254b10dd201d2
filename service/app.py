"""The application factory."""

from __future__ import annotations

import logging
from collections.abc import Mapping
from typing import Any

from flask import Flask
from flask.json.provider import DefaultJSONProvider
from werkzeug.middleware.proxy_fix import ProxyFix

from service import api, auth, errors, health, metrics, observability, request_db, web
from service.api.blueprint import guard_request, guard_text
from service.config import load_settings


class StrictJSONProvider(DefaultJSONProvider):
    """Never emit NaN or Infinity (invalid JSON): a slip becomes a loud 500, not a bad document."""

    def dumps(self, obj: Any, **kwargs: Any) -> str:
        kwargs.setdefault("allow_nan", False)
        return super().dumps(obj, **kwargs)


def create_app(config: Mapping[str, Any] | None = None) -> Flask:
    """Build the app from the environment, then ``config`` (which may set ``DATABASE_URL`` too).

    Nothing connects here: the database is first touched by the first request that needs it.
    """
    settings = load_settings(config)
    app = Flask(__name__, static_folder=None)
    app.json_provider_class = StrictJSONProvider
    app.json = StrictJSONProvider(app)
    app.config.update(
        ULLAGE_SETTINGS=settings,
        DATABASE_URL=settings.database_url,
        SECRET_KEY=settings.secret_key,
        TESTING=settings.testing,
        MAX_CONTENT_LENGTH=settings.max_calculation_bytes,
        SESSION_COOKIE_HTTPONLY=True,
        SESSION_COOKIE_SAMESITE="Strict",
        SESSION_COOKIE_NAME="ullage_session",
    )
    if settings.trusted_proxies:
        # Behind N proxies: the scheme (so the session cookie gets Secure) and the client address
        # as the nearest proxy forwards them. gunicorn's own reading of these headers is off
        # (service/gunicorn_conf.py), so this setting alone decides.
        n = settings.trusted_proxies
        app.wsgi_app = ProxyFix(app.wsgi_app, x_for=n, x_proto=n)  # type: ignore[method-assign]
    logging.getLogger("ullage").setLevel(settings.log_level)
    observability.init_app(app)
    request_db.init_app(app)
    errors.init_app(app)
    auth.init_app(app)
    app.before_request(guard_text)
    app.before_request(guard_request)
    health.init_app(app)
    api.init_app(app)
    metrics.init_app(app)
    web.init_app(app)
    return app
