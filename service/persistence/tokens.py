"""API tokens: the hot-path lookup by hash, last-use notes and the CLI's listing. Functions never commit."""

from __future__ import annotations

from sqlalchemy import Engine, Row, bindparam, select, update
from sqlalchemy.orm import Session

from service.persistence.db import read_one
from service.persistence.models import Token, utcnow

#: Runs on every request: columns rather than the ORM entity, and the statement built once.
TOKEN_BY_HASH = select(Token.id, Token.name, Token.role, Token.revoked_at, Token.last_used_at).where(
    Token.secret_hash == bindparam("secret_hash")
)


def by_hash(engine: Engine, digest: str) -> Row | None:
    """``(id, name, role, revoked_at, last_used_at)`` of the token with this hash, one autocommit read."""
    return read_one(engine, TOKEN_BY_HASH, {"secret_hash": digest})


def note_use(session: Session, token_id: int) -> None:
    """Set the token's ``last_used_at`` to now."""
    session.execute(update(Token).where(Token.id == token_id).values(last_used_at=utcnow()))


def active_exists(session: Session, role: str) -> bool:
    """Whether an unrevoked token of ``role`` exists."""
    found = session.scalar(select(Token.id).where(Token.role == role, Token.revoked_at.is_(None)).limit(1))
    return found is not None


def named(session: Session, name: str) -> bool:
    """Whether a token (revoked or not) has this name."""
    return session.scalar(select(Token.id).where(Token.name == name)) is not None


def all_by_name(session: Session) -> list[Token]:
    return list(session.scalars(select(Token).order_by(Token.name)))
