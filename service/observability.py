"""Request ids, one JSON log line per request, security headers on every response."""

from __future__ import annotations

import json
import logging
import re
import time
import uuid

from flask import Flask, g, request

REQUEST_ID = re.compile(r"^[A-Za-z0-9._:-]{1,64}$")
access_log = logging.getLogger("ullage.access")

API_HEADERS = {
    "Cache-Control": "no-store",
    "X-Content-Type-Options": "nosniff",
    "X-Frame-Options": "DENY",
    "Referrer-Policy": "no-referrer",
    "Content-Security-Policy": "default-src 'none'; frame-ancestors 'none'; base-uri 'none'",
}


class JsonFormatter(logging.Formatter):
    """One JSON object per line."""

    def format(self, record: logging.LogRecord) -> str:
        entry = {
            "time": self.formatTime(record, "%Y-%m-%dT%H:%M:%S%z"),
            "level": record.levelname,
            "logger": record.name,
            "message": record.getMessage(),
        }
        entry.update(getattr(record, "fields", {}))
        if record.exc_info:
            entry["exception"] = self.formatException(record.exc_info)
        return json.dumps(entry, default=str)


def configure_logging(level: str = "INFO") -> None:
    """JSON lines on stderr for the ``ullage`` loggers (called by the CLI and gunicorn config)."""
    handler = logging.StreamHandler()
    handler.setFormatter(JsonFormatter())
    root = logging.getLogger("ullage")
    root.handlers[:] = [handler]
    root.setLevel(level)
    root.propagate = False


def _start() -> None:
    g.started = time.perf_counter()
    incoming = request.headers.get("X-Request-ID", "")
    g.request_id = incoming if REQUEST_ID.match(incoming) else uuid.uuid4().hex


def _finish(response):  # type: ignore[no-untyped-def]
    for name, value in API_HEADERS.items():
        response.headers.setdefault(name, value)
    response.headers["X-Request-ID"] = g.get("request_id", "")
    caller = g.get("caller")
    access_log.info(
        "request",
        extra={
            "fields": {
                "request_id": g.get("request_id"),
                "method": request.method,
                "path": request.path,
                "status": response.status_code,
                "ms": round((time.perf_counter() - g.get("started", time.perf_counter())) * 1000, 2),
                "caller": caller.name if caller else None,
            }
        },
    )
    return response


def init_app(app: Flask) -> None:
    app.before_request(_start)
    app.after_request(_finish)
