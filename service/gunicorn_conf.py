"""gunicorn settings for Ullage (see conventions: graceful shutdown, no preload, heartbeat in /dev/shm).

Loaded by gunicorn's master as ``--config python:service.gunicorn_conf`` (the Docker image, ``ullage
serve``) or as this file's path. Its values come from the one settings object (service.config), so
a bad value stops the master before any worker forks.
"""

import os

from service.config import load_settings
from service.observability import configure_logging

_settings = load_settings()


workers = _settings.workers
worker_class = "gthread"
threads = _settings.threads
reuse_port = _settings.reuse_port  # service.config.listener_per_worker has the trade-off
timeout = 30
graceful_timeout = 20
keepalive = 5
preload_app = False  # each worker opens its own database connections after the fork
# Workers are recycled against slow leaks, but a worker's start costs about 1.7 s of CPU (imports,
# app, OpenAPI document; benchmarks/reads.py prints it): at 2 000 requests that was 0.85 ms per
# request, more than a /livez answer itself. At 20 000 it is under 0.1 ms.
max_requests = 20000
max_requests_jitter = 2000
worker_tmp_dir = "/dev/shm" if os.path.isdir("/dev/shm") else None
# gunicorn believes X-Forwarded-Proto from 127.0.0.1 by default; the app decides that instead
# (ULLAGE_TRUSTED_PROXIES, werkzeug's ProxyFix), so a local client cannot claim HTTPS.
secure_scheme_headers: dict[str, str] = {}
accesslog = None  # the app writes one JSON line per request itself
errorlog = "-"
loglevel = _settings.log_level.lower()
# gunicorn's own lines (workers booting, exiting, timing out) as JSON lines on stderr, like the
# app's (service.observability); anything else that logs through the root logger too.
logconfig_dict = {
    "version": 1,
    "disable_existing_loggers": False,
    "formatters": {"json": {"()": "service.observability.JsonFormatter"}},
    "handlers": {"json": {"class": "logging.StreamHandler", "formatter": "json", "stream": "ext://sys.stderr"}},
    "root": {"level": "WARNING", "handlers": ["json"]},
    "loggers": {
        "gunicorn.error": {"level": _settings.log_level, "handlers": ["json"], "propagate": False},
        "gunicorn.access": {"level": "INFO", "handlers": ["json"], "propagate": False},
    },
}


def post_worker_init(worker):  # type: ignore[no-untyped-def]
    configure_logging(_settings.log_level)
    from service.bounded import start_pool  # noqa: PLC0415

    start_pool(worker.wsgi)  # the planning processes (service.compute), before the first request


def child_exit(server, worker):  # type: ignore[no-untyped-def]
    """Prometheus multiprocess mode: forget the dead worker's live files (service.metrics)."""
    from service.metrics import mark_process_dead  # noqa: PLC0415

    mark_process_dead(worker.pid)
