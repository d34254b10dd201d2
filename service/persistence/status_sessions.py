"""The status page's server-side sessions (``models.StatusSession``). Functions never commit."""

from __future__ import annotations

import datetime as dt

from sqlalchemy import delete, select
from sqlalchemy.orm import Session

from service.persistence.models import StatusSession, Token


def add(session: Session, token_id: int, secret_hash: str) -> StatusSession:
    row = StatusSession(token_id=token_id, secret_hash=secret_hash)
    session.add(row)
    session.flush()
    return row


def find(session: Session, secret_hash: str) -> tuple[StatusSession, Token] | None:
    """The session with this hash and its token, or ``None``."""
    found = session.execute(
        select(StatusSession, Token)
        .join(Token, Token.id == StatusSession.token_id)
        .where(StatusSession.secret_hash == secret_hash)
    ).one_or_none()
    return None if found is None else (found[0], found[1])


def end(session: Session, secret_hash: str) -> None:
    session.execute(delete(StatusSession).where(StatusSession.secret_hash == secret_hash))


def purge_started_before(session: Session, cutoff: dt.datetime) -> None:
    """Forget every session that started before ``cutoff`` (expired ones; called at sign-in)."""
    session.execute(delete(StatusSession).where(StatusSession.created_at < cutoff))
