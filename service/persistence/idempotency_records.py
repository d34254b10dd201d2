"""The Idempotency-Key store (``service/idempotency.py`` holds the rules). Functions never commit."""

from __future__ import annotations

import datetime as dt
from typing import cast

from sqlalchemy import CursorResult, delete, select, update
from sqlalchemy.orm import Session

from service.persistence.models import IdempotencyRecord
from service.persistence.repository import lock_for_update


def _of(token_id: int, key: str):  # type: ignore[no-untyped-def]
    return select(IdempotencyRecord).where(
        IdempotencyRecord.token_id == token_id, IdempotencyRecord.idempotency_key == key
    )


def find_since(session: Session, token_id: int, key: str, since: dt.datetime) -> IdempotencyRecord | None:
    """The token's record of ``key`` created at or after ``since`` (no lock)."""
    return session.scalars(_of(token_id, key).where(IdempotencyRecord.created_at >= since)).one_or_none()


def find_for_claim(session: Session, token_id: int, key: str) -> IdempotencyRecord | None:
    """The token's record of ``key``, locked ``FOR UPDATE`` on PostgreSQL (SQLite: the write lock)."""
    return session.scalars(lock_for_update(session, _of(token_id, key))).one_or_none()


def purge_before(session: Session, before: dt.datetime, limit: int) -> int:
    """Delete up to ``limit`` records created before ``before``, oldest first; how many went."""
    oldest = (
        select(IdempotencyRecord.id)
        .where(IdempotencyRecord.created_at < before)
        .order_by(IdempotencyRecord.created_at)
        .limit(limit)
    )
    ids = list(session.scalars(oldest))
    if ids:
        session.execute(delete(IdempotencyRecord).where(IdempotencyRecord.id.in_(ids)))
    return len(ids)


def drop(session: Session, record: IdempotencyRecord) -> None:
    session.delete(record)
    session.flush()


def add(session: Session, record: IdempotencyRecord) -> IdempotencyRecord:
    session.add(record)
    session.flush()
    return record


def _in_progress(record_id: int, claim: str):  # type: ignore[no-untyped-def]
    return (
        IdempotencyRecord.id == record_id,
        IdempotencyRecord.claim == claim,
        IdempotencyRecord.state == "in_progress",
    )


def renew(session: Session, record_id: int, claim: str, now: dt.datetime) -> bool:
    """Move the lease of an in-progress claim to ``now``; ``False`` once it is done or taken over."""
    statement = update(IdempotencyRecord).where(*_in_progress(record_id, claim)).values(claimed_at=now)
    renewed = cast(CursorResult, session.execute(statement))  # SQLAlchemy types DML results as plain Result
    return renewed.rowcount == 1


def mark_done(session: Session, record_id: int, claim: str, status: int, body: str, location: str | None) -> bool:
    """Record the answer of an in-progress claim; ``False`` if another attempt took it over."""
    done = cast(  # SQLAlchemy types DML results as plain Result; an UPDATE gives a CursorResult
        CursorResult,
        session.execute(
            update(IdempotencyRecord)
            .where(*_in_progress(record_id, claim))
            .values(state="done", response_status=status, response_body=body, response_location=location)
        ),
    )
    return done.rowcount == 1


def forget(session: Session, record_id: int, claim: str) -> None:
    """Delete an in-progress claim (its request failed)."""
    session.execute(delete(IdempotencyRecord).where(*_in_progress(record_id, claim)))
