"""``GET /metrics``: Prometheus text format, viewer role, safe under gunicorn's worker processes.

Under gunicorn every worker is its own process, so a per-process registry would show whichever
worker answered the scrape. ``service/gunicorn_conf.py`` therefore points prometheus_client at
``ULLAGE_METRICS_DIR`` (through the library's own ``PROMETHEUS_MULTIPROC_DIR``, set in the master
and emptied at start; the ``child_exit`` hook marks dead workers): each worker keeps its values in
memory-mapped files there and the scrape sums them, including the counts of recycled workers.
Outside gunicorn (tests, ``flask run``) the process's own registry is served.

Metrics (labels are bounded: the route *rule*, never the raw path):

* ``ullage_http_requests_total{method, route, status}`` — every request, counted after its
  response is built (a scrape therefore counts the earlier scrapes, not itself).
* ``ullage_http_request_duration_seconds{method, route}`` — histogram.
"""

from __future__ import annotations

import time

from flask import Blueprint, Flask, Response, g, request
from prometheus_client import CONTENT_TYPE_LATEST, REGISTRY, CollectorRegistry, Counter, Histogram, generate_latest
from prometheus_client import values as prometheus_values

from service.auth import allow

UNMATCHED = "unmatched"

# Module level: created once per process, whatever the number of apps (tests build many).
REQUESTS = Counter("ullage_http_requests", "HTTP requests answered", ("method", "route", "status"))
DURATION = Histogram(
    "ullage_http_request_duration_seconds",
    "Time to answer a request",
    ("method", "route"),
    buckets=(0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0),
)

bp = Blueprint("metrics", __name__)


def multiprocess_mode() -> bool:
    """Whether this process keeps its values in files (prometheus_client decided on import)."""
    return prometheus_values.ValueClass is not prometheus_values.MutexValue


def exposition() -> bytes:
    """The current metrics, summed over the workers in multiprocess mode."""
    if multiprocess_mode():
        from prometheus_client import multiprocess  # noqa: PLC0415

        registry = CollectorRegistry()
        multiprocess.MultiProcessCollector(registry)
        return generate_latest(registry)
    return generate_latest(REGISTRY)


@bp.get("/metrics")
@allow("viewer")
def metrics() -> Response:
    """Prometheus text exposition format (viewer token)."""
    response = Response(exposition())
    response.headers["Content-Type"] = CONTENT_TYPE_LATEST
    return response


def _start() -> None:
    g.metrics_started = time.perf_counter()


def _record(response):  # type: ignore[no-untyped-def]
    route = request.url_rule.rule if request.url_rule is not None else UNMATCHED
    REQUESTS.labels(request.method, route, str(response.status_code)).inc()
    started = g.get("metrics_started")
    if started is not None:
        DURATION.labels(request.method, route).observe(time.perf_counter() - started)
    return response


def init_app(app: Flask) -> None:
    app.before_request(_start)
    app.after_request(_record)
    app.register_blueprint(bp)


def mark_process_dead(pid: int) -> None:
    """gunicorn ``child_exit``: drop a dead worker's live-gauge files (counters are kept and summed)."""
    if multiprocess_mode():
        from prometheus_client import multiprocess  # noqa: PLC0415

        multiprocess.mark_process_dead(pid)
