"""Network plan jobs (issue 16): the table-backed queue of ``network_plan_jobs``. Functions never commit.

States: ``queued`` → ``running`` (claimed by one worker) → ``done`` or ``failed``. Every state change
is one conditional ``UPDATE … WHERE id = :id AND status = :expected``; its row count says whether this
caller won, so two workers (threads, processes or hosts on one database) never run the same job, on
SQLite and PostgreSQL alike, with no ``SKIP LOCKED``.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import CursorResult, func, select, update
from sqlalchemy.orm import Session

from service.persistence.models import NetworkPlanJob, Site, Truck, utcnow
from service.persistence.plans import digest
from service.persistence.repository import NotFound, lock_for_update

#: Error of a running job whose worker stopped writing its heartbeat.
STALE_ERROR = (
    "The worker computing this plan stopped (no heartbeat for {lease:g} s: the process was killed or "
    "restarted). Nothing was applied; post the network plan again."
)


def add_job(session: Session, *, created_by: str, start_date: dt.date, inputs: dict[str, Any]) -> NetworkPlanJob:
    """A new ``queued`` job with its input snapshot."""
    job = NetworkPlanJob(
        status="queued",
        progress=0.0,
        created_by=created_by,
        start_date=start_date,
        inputs=inputs,
        inputs_digest=digest(inputs),
        attempts=0,
    )
    session.add(job)
    session.flush()
    return job


def job_by_id(session: Session, job_id: int) -> NetworkPlanJob:
    job = session.get(NetworkPlanJob, job_id)
    if job is None:
        raise NotFound(f"No network plan with id {job_id}.")
    return job


def recent(session: Session, limit: int = 5) -> list[dict[str, Any]]:
    """The newest ``limit`` jobs for the status page, newest first, without their large JSON: the
    state columns, the trucks' codes, the number of sites, and of a result its status, cost per day,
    gap and number of unserved sites (read inside the database: ``JSON_EXTRACT`` on SQLite, ``->``
    on PostgreSQL)."""
    job = NetworkPlanJob
    columns = (
        job.id, job.status, job.progress, job.created_at, job.created_by, job.started_at, job.heartbeat_at,
        job.finished_at, job.error, job.activated_at, job.activated_by,
        job.inputs["trucks"].label("trucks"),
        func.json_array_length(job.inputs["sites"]).label("site_count"),
        job.result["status"].as_string().label("result_status"),
        job.result["cost_per_day"].as_float().label("cost_per_day"),
        job.result["gap"].as_float().label("gap"),
        func.json_array_length(job.result["unserved"]).label("unserved"),
    )  # fmt: skip
    rows = session.execute(select(*columns).order_by(job.id.desc()).limit(limit)).mappings().all()
    # SQLite counts a missing result's unserved as 0 (json_array_length('null')): None without a result.
    return [
        dict(
            row,
            trucks=[t["code"] for t in row["trucks"] or ()],
            unserved=row["unserved"] if row["result_status"] else None,
        )
        for row in rows
    ]


def _changed(session: Session, statement: Any) -> bool:
    result: CursorResult[Any] = session.execute(statement)  # type: ignore[assignment]  # an UPDATE's result
    return result.rowcount == 1


def has_work(session: Session, lease_seconds: float, now: dt.datetime | None = None) -> bool:
    """Whether a job is queued or a running one's heartbeat is older than the lease (one read, so an
    idle worker's poll takes no write lock)."""
    cutoff = (now or utcnow()) - dt.timedelta(seconds=lease_seconds)
    statement = select(NetworkPlanJob.id).where(
        (NetworkPlanJob.status == "queued")
        | ((NetworkPlanJob.status == "running") & (NetworkPlanJob.heartbeat_at < cutoff))
    )
    return session.scalars(statement.limit(1)).first() is not None


def claim_next(session: Session, worker: str, now: dt.datetime | None = None) -> int | None:
    """Claim the oldest queued job for ``worker``: its id, or ``None`` when none is left.

    Tries the queued ids oldest first; each try is a conditional UPDATE, so a job another worker
    claimed meanwhile is skipped. Commit right after to publish the claim.
    """
    now = now or utcnow()
    for job_id in session.scalars(
        select(NetworkPlanJob.id).where(NetworkPlanJob.status == "queued").order_by(NetworkPlanJob.id).limit(10)
    ).all():
        won = _changed(
            session,
            update(NetworkPlanJob)
            .where(NetworkPlanJob.id == job_id, NetworkPlanJob.status == "queued")
            .values(
                status="running",
                worker=worker,
                started_at=now,
                heartbeat_at=now,
                attempts=NetworkPlanJob.attempts + 1,
            ),
        )
        if won:
            return int(job_id)
    return None


def _running(job_id: int, worker: str) -> Any:
    return update(NetworkPlanJob).where(
        NetworkPlanJob.id == job_id, NetworkPlanJob.status == "running", NetworkPlanJob.worker == worker
    )


def beat(session: Session, job_id: int, worker: str, now: dt.datetime | None = None) -> bool:
    """Write the heartbeat of a running job; False when the job is no longer this worker's."""
    return _changed(session, _running(job_id, worker).values(heartbeat_at=now or utcnow()))


def write_progress(session: Session, job_id: int, worker: str, progress: float) -> bool:
    """Write ``progress`` (clamped to 0–1); False when the job is no longer this worker's."""
    return _changed(session, _running(job_id, worker).values(progress=min(1.0, max(0.0, float(progress)))))


def finish(
    session: Session,
    job_id: int,
    worker: str,
    *,
    result: dict[str, Any] | None = None,
    error: str | None = None,
    now: dt.datetime | None = None,
) -> bool:
    """``done`` with ``result``, or ``failed`` with ``error``; False when the job is no longer this
    worker's (e.g. it was failed as stale meanwhile: its result is then dropped)."""
    now = now or utcnow()
    values: dict[str, Any] = {"finished_at": now, "heartbeat_at": now}
    if error is None:
        values |= {"status": "done", "result": result, "progress": 1.0}
    else:
        values |= {"status": "failed", "error": error}
    return _changed(session, _running(job_id, worker).values(**values))


def requeue(session: Session, job_id: int, worker: str, max_attempts: int) -> str | None:
    """Hand a running job of ``worker`` back to the queue (its worker is shutting down gracefully):
    ``"queued"``, or ``"failed"`` once it has been claimed ``max_attempts`` times; ``None`` when it is no
    longer this worker's."""
    if _changed(
        session,
        _running(job_id, worker)
        .where(NetworkPlanJob.attempts < max_attempts)
        .values(status="queued", worker=None, started_at=None, heartbeat_at=None, progress=0.0),
    ):
        return "queued"
    error = f"Its worker was stopped {max_attempts} times while computing it; post the network plan again."
    if _changed(session, _running(job_id, worker).values(status="failed", error=error, finished_at=utcnow())):
        return "failed"
    return None


def fail_stale(session: Session, lease_seconds: float, now: dt.datetime | None = None) -> list[int]:
    """Fail every running job whose heartbeat is older than ``lease_seconds``; their ids."""
    now = now or utcnow()
    cutoff = now - dt.timedelta(seconds=lease_seconds)
    stale = list(
        session.scalars(
            select(NetworkPlanJob.id).where(NetworkPlanJob.status == "running", NetworkPlanJob.heartbeat_at < cutoff)
        )
    )
    failed = []
    for job_id in stale:
        if _changed(
            session,
            update(NetworkPlanJob)
            .where(
                NetworkPlanJob.id == job_id, NetworkPlanJob.status == "running", NetworkPlanJob.heartbeat_at < cutoff
            )
            .values(status="failed", error=STALE_ERROR.format(lease=lease_seconds), finished_at=now),
        ):
            failed.append(job_id)
    return failed


def mark_activated(session: Session, job_id: int, by: str, now: dt.datetime | None = None) -> bool:
    """Set ``activated_at``/``by`` once, on a done job; False when it was activated already."""
    return _changed(
        session,
        update(NetworkPlanJob)
        .where(NetworkPlanJob.id == job_id, NetworkPlanJob.status == "done", NetworkPlanJob.activated_at.is_(None))
        .values(activated_at=now or utcnow(), activated_by=by),
    )


def lock_trucks(session: Session, codes: list[str]) -> dict[str, Truck]:
    """The trucks among ``codes``, by code, locked (PostgreSQL ``FOR UPDATE``) in code order."""
    statement = select(Truck).where(Truck.code.in_(codes)).order_by(Truck.code)
    return {t.code: t for t in session.scalars(lock_for_update(session, statement))}


def lock_sites(session: Session, codes: list[str]) -> dict[str, Site]:
    """The sites among ``codes``, by code, locked (PostgreSQL ``FOR UPDATE``) in code order; after the trucks."""
    statement = select(Site).where(Site.code.in_(codes)).order_by(Site.code)
    return {s.code: s for s in session.scalars(lock_for_update(session, statement))}
