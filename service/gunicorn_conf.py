"""gunicorn settings for Ullage (see conventions: graceful shutdown, no preload, heartbeat in /dev/shm)."""

import os

from service.observability import configure_logging

workers = int(os.environ.get("WEB_CONCURRENCY", "2"))
worker_class = "gthread"
threads = int(os.environ.get("ULLAGE_THREADS", "4"))
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
accesslog = None  # the app writes one JSON line per request itself
errorlog = "-"


def post_worker_init(worker):  # type: ignore[no-untyped-def]
    configure_logging(os.environ.get("LOG_LEVEL", "INFO"))


def child_exit(server, worker):  # type: ignore[no-untyped-def]
    """Prometheus multiprocess mode: forget the dead worker's live files (service.metrics)."""
    from service.metrics import mark_process_dead  # noqa: PLC0415

    mark_process_dead(worker.pid)
