"""gunicorn settings for Ullage (see conventions: graceful shutdown, no preload, heartbeat in /dev/shm)."""

import os
from pathlib import Path

from service.observability import configure_logging

MIGRATE_REQUESTS = Path("/proc/sys/net/ipv4/tcp_migrate_req")


def listener_per_worker(setting: str | None, migrate_requests: Path = MIGRATE_REQUESTS) -> bool:
    """Whether each worker listens on its own ``SO_REUSEPORT`` socket (gunicorn's ``reuse_port``).

    With one shared listening socket, whichever worker wakes first accepts a burst of connections
    and keep-alive pins them there: this machine showed all 32 of a load run's connections on one
    of two workers, the other idle and weekly trips at half their rate (docs/reliability.md). With
    a socket per worker, the kernel spreads new connections over the workers by a hash of their
    addresses. The catch: a worker that stops (recycling after ``max_requests``, shutdown) keeps
    its socket until its in-flight requests finish, and connections queued on it meanwhile are reset
    unless the kernel hands them to another worker's socket (``net.ipv4.tcp_migrate_req = 1``,
    Linux 5.14 and later). So ``ULLAGE_REUSE_PORT`` unset means: on where the kernel migrates them;
    ``1`` or ``0`` decides outright.
    """
    if setting in ("1", "0"):
        return setting == "1"
    if setting not in (None, ""):
        raise ValueError(f"ULLAGE_REUSE_PORT must be 1, 0 or unset, not {setting!r}")
    try:
        return migrate_requests.read_text().strip() == "1"
    except OSError:  # not Linux, or a kernel without request migration
        return False


workers = int(os.environ.get("WEB_CONCURRENCY", "2"))
worker_class = "gthread"
threads = int(os.environ.get("ULLAGE_THREADS", "4"))
reuse_port = listener_per_worker(os.environ.get("ULLAGE_REUSE_PORT"))
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
