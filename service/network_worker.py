"""The network plan worker (issue 16): claims queued jobs and computes them, one at a time per thread.

The same loop runs as ``ULLAGE_NETWORK_WORKERS`` threads of every serving process (started with the
planning pool as a gunicorn worker starts, :func:`start`) and as ``ullage worker`` in a process of its
own (:func:`serve`). Jobs are rows of ``network_plan_jobs`` (``persistence/network_jobs.py``): a claim
is one conditional UPDATE, so however many workers share a database, each job runs once.

**Where the work runs.** The computation runs in a child process of its own low-priority pool
(:mod:`service.compute`, niceness 19), so it holds neither a request thread nor the serving process's
GIL; the thread only waits. The child writes ``progress`` (at most once a second, from the core's
progress callback, ``plan_network(progress=…)``); the waiting thread writes the heartbeat every
:data:`BEAT_SECONDS`. The child is killed at the job's budget plus ``ULLAGE_PLAN_GRACE_SECONDS``.

**A worker that stops.** Stopped gracefully (gunicorn's ``worker_exit``, e.g. recycled after
``max_requests``; ``ullage worker`` interrupted), it hands its job back to the queue
(:func:`release_all`; failed instead after :data:`MAX_ATTEMPTS` claims). Killed, its heartbeat stops; after ``ULLAGE_NETWORK_LEASE_SECONDS`` the next worker
or reader of the job fails it with a clear error (``network_jobs.fail_stale``). A job never writes
anything but its own row until it is activated (a separate request), so a dead worker leaves nothing
half-applied. A result that arrives after its job was failed is dropped.
"""

from __future__ import annotations

import datetime as dt
import logging
import os
import signal
import socket
import threading
import time
from typing import Any

from flask import Flask
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session

from service import compute
from service.config import Settings
from service.network_inputs import fleet_inputs
from service.persistence import network_jobs as jobs
from service.persistence.db import make_engine, write_intent
from service.planning import PlanningInputError
from service.planning.fleet import plan_network

log = logging.getLogger("ullage.network")
#: Seconds between two heartbeats of a running job, and between two progress writes.
BEAT_SECONDS = 5.0
PROGRESS_SECONDS = 1.0
PRELOAD = ("service.network_worker",)
#: A job handed back by a worker that shuts down gracefully is queued again until it was claimed this often.
MAX_ATTEMPTS = 3


class JobGone(Exception):
    """The job is no longer this worker's (failed as stale meanwhile): stop computing it."""


def worker_name() -> str:
    return f"{socket.gethostname()}:{os.getpid()}:{threading.get_ident()}"


def _sessions(url: str) -> Any:
    engine = make_engine(url)

    def session(write: bool = True) -> Session:
        write_intent.set(write)  # SQLite: BEGIN IMMEDIATE only for writes (persistence/db.py)
        return Session(engine)

    return engine, session


def compute_job(database_url: str, job_id: int, worker: str, inputs: dict[str, Any], start: str, budget: float) -> dict:
    """In a pool child: the network plan of a snapshot as plain values, progress written on the way."""
    engine, session = _sessions(database_url)
    last = [0.0]

    def progress(fraction: float) -> None:
        now = time.monotonic()
        if now - last[0] < PROGRESS_SECONDS:
            return
        last[0] = now
        try:
            with session() as s:
                ok = jobs.write_progress(s, job_id, worker, fraction)
                s.commit()
        except DBAPIError:  # the database is down or busy: this fraction is not shown, the plan goes on
            return
        if not ok:
            raise JobGone(f"network plan {job_id} is no longer running here")

    try:
        day = dt.date.fromisoformat(start)
        sites, trucks, depots, products, calendars = fleet_inputs(inputs, day)
        result = plan_network(
            sites, trucks, depots, products, calendars, start_date=day, time_budget_seconds=budget, progress=progress
        )
        return result.to_dict()
    finally:
        engine.dispose()


class Worker:
    """One worker loop on ``settings.database_url``."""

    def __init__(self, settings: Settings, name: str | None = None):
        self.settings = settings
        self.name = name or worker_name()
        self.engine, self.session = _sessions(settings.database_url)
        self.pool = compute.pool(max(1, settings.network_workers), 0, PRELOAD)
        self.current: int | None = None

    def close(self) -> None:
        self.engine.dispose()

    def run_once(self) -> int | None:
        """Fail stale jobs, then claim and compute the oldest queued one: its id, or ``None``."""
        with self.session(write=False) as s:
            if not jobs.has_work(s, self.settings.network_lease_seconds):
                return None
        with self.session() as s:
            failed = jobs.fail_stale(s, self.settings.network_lease_seconds)
            job_id = jobs.claim_next(s, self.name)
            s.commit()
            if failed:
                log.warning("network plans failed for a stale heartbeat", extra={"fields": {"jobs": failed}})
            if job_id is None:
                return None
            job = jobs.job_by_id(s, job_id)
            inputs, start, budget = job.inputs, job.start_date.isoformat(), float(job.inputs["time_budget_seconds"])
        log.info("network plan started", extra={"fields": {"job": job_id, "worker": self.name}})
        self.current = job_id  # stays set if an interrupt ends the computation: release() hands it back
        result, error = self._compute(job_id, inputs, start, budget)
        with self.session() as s:
            kept = jobs.finish(s, job_id, self.name, result=result, error=error)
            s.commit()
        self.current = None
        log.info("network plan finished", extra={"fields": {"job": job_id, "ok": error is None, "kept": kept}})
        return job_id

    def _compute(self, job_id: int, inputs: dict, start: str, budget: float) -> tuple[dict | None, str | None]:
        beat = [time.monotonic()]
        gone = [False]

        def heartbeat() -> bool:  # called by the pool every 0.1 s while it waits
            if time.monotonic() - beat[0] >= BEAT_SECONDS:
                beat[0] = time.monotonic()
                try:
                    with self.session() as s:
                        gone[0] = not jobs.beat(s, job_id, self.name)
                        s.commit()
                except DBAPIError:  # a short outage: the next beat may pass, the lease allows three missed
                    log.warning("network plan worker: heartbeat not written (database unavailable)")
            return gone[0]

        limit = budget + self.settings.plan_grace_seconds
        try:
            with self.pool.admitted():
                value = self.pool.run(
                    compute_job,
                    (self.settings.database_url, job_id, self.name, inputs, start, budget),
                    limit=limit,
                    wait=limit,
                    cancelled=heartbeat,
                )
            return value, None
        except PlanningInputError as exc:
            return None, f"The stored parameters cannot be planned: {exc}"
        except compute.Overrun:
            return None, f"Stopped at the hard limit of {limit:g} s (budget plus ULLAGE_PLAN_GRACE_SECONDS)."
        except (compute.Cancelled, JobGone):
            return None, "The job was failed while it ran (its heartbeat was late)."
        except compute.Crashed:
            return None, "The planning process died (killed, or out of memory); post the network plan again."
        except Exception as exc:  # noqa: BLE001 - any other failure fails the job, with its message
            log.exception("network plan failed", extra={"fields": {"job": job_id}})
            return None, f"The computation failed: {type(exc).__name__}: {exc}"

    def loop(self, stop: threading.Event) -> None:
        """Run jobs until ``stop`` is set; between jobs, wait ``network_poll_seconds``."""
        while not stop.is_set():
            try:
                if self.run_once() is None:
                    stop.wait(self.settings.network_poll_seconds)
            except DBAPIError as exc:  # the database is down or busy: wait and try again
                log.warning("network plan worker: database unavailable (%s); retrying", type(exc.orig).__name__)
                stop.wait(self.settings.network_poll_seconds)
            except Exception:  # noqa: BLE001 - a bug: logged with its trace, the loop goes on
                log.exception("network plan worker: retrying")
                stop.wait(self.settings.network_poll_seconds)

    def release(self) -> str | None:
        """Hand the job being computed back to the queue (:func:`network_jobs.requeue`); what became of it."""
        job_id = self.current
        if job_id is None:
            return None
        with self.session() as s:
            outcome = jobs.requeue(s, job_id, self.name, MAX_ATTEMPTS)
            s.commit()
        log.warning("network plan handed back", extra={"fields": {"job": job_id, "outcome": outcome}})
        return outcome


_workers: list[Worker] = []
STOP = threading.Event()


def start(app: Flask) -> None:
    """Start ``ULLAGE_NETWORK_WORKERS`` daemon threads running the loop (gunicorn's post_worker_init)."""
    settings: Settings = app.config["ULLAGE_SETTINGS"]
    for n in range(settings.network_workers):
        worker = Worker(settings)
        threading.Thread(target=worker.loop, args=(STOP,), name=f"network-worker-{n}", daemon=True).start()
        _workers.append(worker)


def release_all() -> None:
    """On a graceful exit (gunicorn's ``worker_exit``, e.g. recycling after ``max_requests``): stop the
    loops and hand every job being computed back to the queue, so another worker computes it."""
    STOP.set()
    for worker in _workers:
        try:
            worker.release()
        except Exception as exc:  # noqa: BLE001 - the database is gone too: the lease fails the job later
            log.warning("network plan worker: could not hand a job back (%s)", type(exc).__name__)


def _terminate(_signum: int, _frame: Any) -> None:
    raise SystemExit(0)  # unwinds to serve()'s release(), as Ctrl-C does


def serve(settings: Settings, stop: threading.Event | None = None) -> None:
    """``ullage worker``: the loop in this process until interrupted."""
    worker = Worker(settings)
    signal.signal(signal.SIGTERM, _terminate)
    try:
        worker.loop(stop or STOP)
    finally:
        worker.release()
        worker.close()
