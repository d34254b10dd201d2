"""gunicorn settings for Ullage: graceful shutdown, no preload (each worker builds its own app and
engines after the fork), the worker heartbeat in /dev/shm (a RAM disk: a slow disk cannot make
the arbiter think a worker hung)."""

import os

from service.observability import configure_logging


def listener_per_worker(setting: str | None) -> bool:
    """Whether each worker listens on its own ``SO_REUSEPORT`` socket (gunicorn's ``reuse_port``).

    ``ULLAGE_REUSE_PORT=1`` turns it on; unset or ``0`` keeps gunicorn's one shared socket, which
    the master holds for the service's whole life. The trade-off, as ``benchmarks/load.py`` printed
    it (docs/reliability.md):

    * shared socket: whichever worker wakes first accepts a burst of connections and keep-alive
      pins them there; with 32 connections, some slices ran with all 32 on one of two workers and
      weekly trips at 380–400 req/s against 610–700 in the other slices;
    * a socket per worker: the kernel spreads new connections over the workers by a hash of their
      addresses, but a socket lives and dies with its worker. While a worker restarts (recycled
      after ``max_requests``, or crashed) connections queued on its socket are reset, and while
      every worker restarts at once nothing listens: recycling every 1 500 requests gave thousands
      of connection errors in a run where the shared socket gave none.

    So the safe one is the default, and a socket per worker is for many long-lived connections
    where throughput matters more than a rare refused connection that a client retries.
    """
    if setting in (None, "", "0"):
        return False
    if setting == "1":
        return True
    raise ValueError(f"ULLAGE_REUSE_PORT must be 1, 0 or unset, not {setting!r}")


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
# gunicorn believes X-Forwarded-Proto from 127.0.0.1 by default; the app decides that instead
# (ULLAGE_TRUSTED_PROXIES, werkzeug's ProxyFix), so a local client cannot claim HTTPS.
secure_scheme_headers: dict[str, str] = {}
accesslog = None  # the app writes one JSON line per request itself
errorlog = "-"


def post_worker_init(worker):  # type: ignore[no-untyped-def]
    configure_logging(os.environ.get("LOG_LEVEL", "INFO"))
    from service.bounded import start_pool  # noqa: PLC0415

    start_pool(worker.wsgi)  # the planning processes (service.compute), before the first request


def child_exit(server, worker):  # type: ignore[no-untyped-def]
    """Prometheus multiprocess mode: forget the dead worker's live files (service.metrics)."""
    from service.metrics import mark_process_dead  # noqa: PLC0415

    mark_process_dead(worker.pid)
