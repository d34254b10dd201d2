"""gunicorn settings for Ullage: graceful shutdown, no preload (each worker builds its own app and
engines after the fork), the worker heartbeat in /dev/shm (a RAM disk: a slow disk cannot make the
arbiter think a worker hung).

Loaded by gunicorn's master from this file's path (``ullage serve``, which the Docker image runs, and
the tests and benchmarks that start gunicorn). Its values come from the one settings object
(service.config), so a bad value stops the master before any worker forks.
"""

import os
from pathlib import Path

from gunicorn import glogging

from service.config import load_settings
from service.observability import JsonFormatter, configure_logging

_settings = load_settings()

# Prometheus multiprocess mode (service/metrics.py): every worker keeps its metrics in files of
# ULLAGE_METRICS_DIR and a scrape of /metrics sums them, so it counts the requests of all workers.
METRICS_DIR = Path(_settings.metrics_dir).resolve()

workers = _settings.workers
worker_class = "gthread"
threads = _settings.threads
reuse_port = _settings.reuse_port  # service.config.listener_per_worker has the trade-off
timeout = 30
graceful_timeout = 20
keepalive = 5
preload_app = False  # each worker opens its own database connections and metrics files after the fork
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
# gunicorn 25.1+ opens a control socket (worker count, reload, shutdown) under $HOME or
# $XDG_RUNTIME_DIR by default: one path shared by every gunicorn of the user, and a way to change
# the service from outside its configuration. Off (older releases ignore the unknown name).
control_socket_disable = True


class JsonLogger(glogging.Logger):
    """gunicorn's own lines (booting, exiting, timeouts) as JSON lines on stderr, like the app's.

    A subclass rather than ``logconfig_dict``: gunicorn takes any logging config as a wish for its
    access log too, which would add a second line per request (the app writes its own).
    """

    def setup(self, cfg):  # type: ignore[no-untyped-def]
        super().setup(cfg)
        for handler in self.error_log.handlers:
            handler.setFormatter(JsonFormatter())


logger_class = JsonLogger


def on_starting(server):  # type: ignore[no-untyped-def]
    """Once per master, before any worker forks: an empty metrics directory (a previous run's
    files would be summed in; a reload on SIGHUP keeps the running workers' counts), handed to
    prometheus_client in its own variable, which it reads when a worker imports it (so the app is
    never preloaded in the master)."""
    METRICS_DIR.mkdir(parents=True, exist_ok=True)
    for stale in METRICS_DIR.glob("*.db"):
        stale.unlink()
    os.environ["PROMETHEUS_MULTIPROC_DIR"] = str(METRICS_DIR)


def post_worker_init(worker):  # type: ignore[no-untyped-def]
    configure_logging(_settings.log_level)
    from service.bounded import start_pool  # noqa: PLC0415

    start_pool(worker.wsgi)  # the planning processes (service.compute), before the first request
    from service.network_worker import start  # noqa: PLC0415

    start(worker.wsgi)  # ULLAGE_NETWORK_WORKERS threads running network plan jobs


def worker_exit(server, worker):  # type: ignore[no-untyped-def]
    from service.network_worker import release_all  # noqa: PLC0415

    release_all()  # a network plan job being computed goes back to the queue for another worker


def child_exit(server, worker):  # type: ignore[no-untyped-def]
    """Prometheus multiprocess mode: forget the dead worker's live files (service.metrics)."""
    from service.metrics import mark_process_dead  # noqa: PLC0415

    mark_process_dead(worker.pid)
