"""Bounded work: heavy computations in the process pool under the time budget, size limits, and
per-token limits on the expensive routes (README "Bounded work", docs/reliability.md).

**Where heavy work runs.** Every planning computation (``POST /calculations/joint``,
``POST /trucks/{code}/plans``) and every trips window longer than ``ULLAGE_LONG_TRIPS_DAYS`` runs
in a child of this gunicorn worker's :class:`service.compute.Pool` (``ULLAGE_PLAN_PROCESSES``
children at niceness 19, at most ``ULLAGE_PLAN_QUEUE`` more requests waiting), never in the
request thread, so it can neither hold the worker's GIL nor outlive its limit.

**Time.** The planner gets ``deadline_seconds=ULLAGE_PLAN_SECONDS`` when its signature accepts
it (checked with :func:`inspect.signature`): an anytime planner then returns the best drivable
plan it has by then, and its own budget takes over. Whatever the planner, the child is killed
``ULLAGE_PLAN_GRACE_SECONDS`` after the budget and the request answers **503** with
``Retry-After`` (kind ``planning-time-limit``). 503 rather than 422 because the outcome depends on
the machine's load (the children yield the CPU to the request workers), not only on the request:
a request too large for the budget whatever the load is refused up front with 422 by the size
limit (``ULLAGE_MAX_PLAN_SITES``, kind ``too-many-sites``). No free child: 503 ``planning-busy``.

**A client that leaves.** Under gunicorn the request's socket is in the WSGI environ
(``gunicorn.socket``). While the request thread waits for its child it peeks at that socket every
0.1 s; end-of-file or a reset means the client left, and the child is killed (logged; answered
499 to nobody). A client that half-closes its side after sending its request counts as gone. A
plan POST with an ``Idempotency-Key`` goes on (within the hard limit): its client's retry is to
get that plan, not to start another computation. A ``gthread`` worker cannot interrupt a thread, but a thread that only waits can
look: that is why the work is in a child. Without the socket (Flask's test client, another
server) only the hard limit applies; behind a proxy it works when the proxy closes its upstream
connection when its client leaves (nginx does, ``proxy_ignore_client_abort off``).

**Per-token limits.** ``ULLAGE_PLANNING_PER_MINUTE`` planning requests and
``ULLAGE_HEAVY_READS_PER_MINUTE`` heavy reads (trips windows longer than
``ULLAGE_LONG_TRIPS_DAYS`` and status overviews not already cached) per token and fixed
60-second window; beyond, 429 with ``Retry-After`` (the seconds to the window's end). The
counters are a table of the service's own database (``request_quotas``, one upsert per limited
request), so every worker and every host behind the same database shares them with no new
infrastructure; flask-limiter's storages are memory (one per process) or an outside server.
A worker that has answered 429 remembers it until the window ends and answers the next ones
without the database. Admins are exempt: they run the service, and the pool's bound and the
budget protect the weekly call from any caller.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import functools
import inspect
import json
import logging
import math
import select
import socket
import time
from collections.abc import Callable, Iterator, Sequence
from typing import Any, TypeVar

from flask import Flask, current_app, g, request
from sqlalchemy import Engine
from sqlalchemy.orm import Session

from service import compute
from service.cache import LruCache
from service.config import Settings
from service.errors import Problem
from service.persistence import quota
from service.persistence.db import make_engine, write_intent

log = logging.getLogger("ullage.bounded")
F = TypeVar("F", bound=Callable[..., Any])

#: Modules the fork server imports once, so a new child starts in milliseconds.
PRELOAD = ("service.bounded", "service.api.plans")
WINDOW_SECONDS = 60
PLANNING, HEAVY_READ = "planning", "heavy_read"
#: Per app: the (token id, bucket, window start) that this worker already answered 429.
REFUSED = "ullage.refused"
_clock = time.time  # the rate limit's clock (tests move it instead of sleeping)


def settings() -> Settings:
    return current_app.config["ULLAGE_SETTINGS"]


# --- size ---------------------------------------------------------------------------------------


def check_sites(count: int, pointer: str) -> None:
    """422 when one planning call would take more sites than ``ULLAGE_MAX_PLAN_SITES``."""
    limit = settings().max_plan_sites
    if count > limit:
        detail = (
            f"{count} sites is more than one planning call takes (at most {limit}, ULLAGE_MAX_PLAN_SITES): "
            f"it could not finish within the planning budget of {settings().plan_seconds:g} s."
        )
        raise Problem(422, detail, kind="too-many-sites", errors=[{"pointer": pointer, "detail": detail}])


def sites_limited(view: F) -> F:
    """Refuse an oversized ``sites`` list before the body schema validates each site."""

    @functools.wraps(view)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            body = request.get_json(silent=True)
        except RecursionError:  # nested too deeply: the body's parser answers 400 for it
            body = None
        if isinstance(body, dict) and isinstance(body.get("sites"), list):
            check_sites(len(body["sites"]), "#/sites")
        return view(*args, **kwargs)

    return wrapper  # type: ignore[return-value]


# --- the pool -------------------------------------------------------------------------------------


def _client_gone(sock: socket.socket | None) -> Callable[[], bool]:
    """Whether the client of ``sock`` has closed its side (or reset the connection)."""

    def gone() -> bool:
        if sock is None:
            return False
        try:
            readable, _, _ = select.select([sock], [], [], 0)
            if not readable:
                return False
            return sock.recv(1, socket.MSG_PEEK | socket.MSG_DONTWAIT) == b""
        except BlockingIOError:
            return False
        except (OSError, ValueError):
            return True

    return gone


def _pool() -> compute.Pool:
    config = settings()
    return compute.pool(config.plan_processes, config.plan_queue, PRELOAD)


def start_pool(app: Flask) -> None:
    """Start this process's pool now (gunicorn's ``post_worker_init``), not in the first request:
    the fork server's imports cost a second or two of CPU."""
    with app.app_context():
        _pool().start()


def _busy(exc: compute.Busy) -> Problem:
    return Problem(
        503,
        f"The planning capacity is busy ({exc}); retry later.",
        kind="planning-busy",
        headers={"Retry-After": str(math.ceil(settings().plan_seconds))},
    )


def admitted(view: F) -> F:
    """Take the request's place in the pool before the body is parsed (503 at once when full)."""

    @functools.wraps(view)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        with contextlib.ExitStack() as stack:
            try:
                stack.enter_context(_pool().admitted())
            except compute.Busy as exc:
                raise _busy(exc) from exc
            g.pool_admitted = True
            try:
                return view(*args, **kwargs)
            finally:
                g.pool_admitted = False

    return wrapper  # type: ignore[return-value]


def run(fn: Callable[..., Any], *args: Any, cancellable: bool = True) -> Any:
    """``fn(*args)`` in this worker's pool, within the budget plus its grace.

    ``cancellable``: stop it when the client leaves (not for a plan POST with an Idempotency-Key,
    whose client's retry is to get the plan once it is recorded).
    """
    if not g.get("pool_admitted"):
        return admitted(run)(fn, *args, cancellable=cancellable)
    config = settings()
    budget, limit = config.plan_seconds, config.plan_seconds + config.plan_grace_seconds
    retry = {"Retry-After": str(math.ceil(budget))}
    try:
        sock = request.environ.get("gunicorn.socket") if cancellable else None
        return _pool().run(fn, args, limit=limit, wait=limit, cancelled=_client_gone(sock))
    except compute.Busy as exc:
        raise _busy(exc) from exc
    except compute.Overrun as exc:
        log.warning("computation stopped at its hard limit", extra={"fields": {"path": request.path, "limit": limit}})
        raise Problem(
            503,
            f"The computation did not finish within the planning budget of {budget:g} s (stopped after {limit:g} s). "
            "Retry later, or plan fewer sites at a time.",
            kind="planning-time-limit",
            headers=retry,
        ) from exc
    except compute.Cancelled as exc:
        log.info("client left; computation stopped", extra={"fields": {"path": request.path}})
        raise Problem(
            499, "The client closed the connection; the computation was stopped.", title="Client Closed Request"
        ) from exc
    except compute.Crashed as exc:
        log.error("planning process died", extra={"fields": {"path": request.path}})
        raise Problem(503, "The computation failed; retry later.", kind="planning-failed", headers=retry) from exc


def planner_options(planner: Callable[..., Any]) -> dict[str, Any]:
    """``deadline_seconds=ULLAGE_PLAN_SECONDS`` for a planner that takes it, else nothing.

    :func:`service.planning.plan_joint` takes it: its anytime search stops itself by then and
    returns the best drivable plan found (status ``time_limit``), so the hard limit
    (``ULLAGE_PLAN_GRACE_SECONDS`` later) is only the safety net. A planner without the parameter
    (a test's stand-in) is stopped by the hard limit alone.
    """
    try:
        parameters = inspect.signature(planner).parameters
    except (TypeError, ValueError):
        return {}
    return {"deadline_seconds": settings().plan_seconds} if "deadline_seconds" in parameters else {}


def dumps(value: Any) -> bytes:
    """JSON as the app writes it (sorted keys, ASCII, never NaN or Infinity), compact."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), allow_nan=False).encode()


def joint_json(planner: Callable[..., Any], sites: Sequence[Any], truck: Any, options: dict[str, Any]) -> bytes:
    """In a child: the joint result as the JSON body (encoding megabytes there, not in the worker)."""
    return dumps(planner(sites, truck, **options).to_dict())


def joint_dict(planner: Callable[..., Any], sites: Sequence[Any], truck: Any, options: dict[str, Any]) -> dict:
    """In a child: the joint result as plain values (to be recorded)."""
    return planner(sites, truck, **options).to_dict()


_engines: dict[str, Engine] = {}


@contextlib.contextmanager
def child_session(database_url: str) -> Iterator[Session]:
    """In a child: a read-only session on its own engine (kept for later tasks on the same database)."""
    engine = _engines.get(database_url)
    if engine is None:
        for other in _engines.values():
            other.dispose()
        _engines.clear()
        engine = _engines[database_url] = make_engine(database_url)
    write_intent.set(False)
    with Session(engine) as session:
        yield session


# --- per-token limits -------------------------------------------------------------------------------


def charge(bucket: str) -> None:
    """Count one request of the caller in ``bucket``; 429 with ``Retry-After`` beyond its limit."""
    config = settings()
    per_minute = {PLANNING: config.planning_per_minute, HEAVY_READ: config.heavy_reads_per_minute}[bucket]
    caller = g.get("caller")
    if per_minute == 0 or caller is None or caller.role == "admin":
        return
    now = _clock()
    window = int(now // WINDOW_SECONDS) * WINDOW_SECONDS
    key = (caller.token_id, bucket, window)
    refused: LruCache[bool] = current_app.extensions.setdefault(REFUSED, LruCache(4096))
    if refused.get(key) is None:
        intent = write_intent.set(True)
        try:
            with current_app.extensions["ullage.sessionmaker"]() as session:
                hits = quota.hit(session, caller.token_id, bucket, window)
                session.commit()
        finally:
            write_intent.reset(intent)
        if hits <= per_minute:
            return
        refused.put(key, True)
    retry = max(1, math.ceil(window + WINDOW_SECONDS - now))
    what = "planning requests" if bucket == PLANNING else "heavy reads (long trips windows, status overviews)"
    raise Problem(
        429,
        f"At most {per_minute} {what} per minute per token; retry in {retry} s.",
        kind="rate-limited",
        headers={"Retry-After": str(retry)},
    )


def planning_limited(view: F) -> F:
    """The per-token planning limit, counted before the body is validated."""

    @functools.wraps(view)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        charge(PLANNING)
        return view(*args, **kwargs)

    return wrapper  # type: ignore[return-value]


def long_window(first: dt.date, last: dt.date) -> bool:
    """Whether a trips window is a heavy read (longer than ``ULLAGE_LONG_TRIPS_DAYS``)."""
    return (last - first).days + 1 > settings().long_trips_days
