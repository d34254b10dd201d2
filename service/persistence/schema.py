"""The schema's state as SQL sees it: the Alembic revision, SQLite file checks for backups.

The SQLite helpers take a plain ``sqlite3`` connection: backups copy files with SQLite's own
online backup API, below SQLAlchemy.
"""

from __future__ import annotations

import sqlite3

from sqlalchemy import Connection, inspect, text

_REVISION = text("SELECT version_num FROM alembic_version")


def revision(connection: Connection) -> str | None:
    """The Alembic revision the database is at (raises if there is no ``alembic_version``)."""
    return connection.execute(_REVISION).scalar_one_or_none()


def revision_if_any(connection: Connection) -> str | None:
    """As :func:`revision`, but ``None`` for a database without ``alembic_version``."""
    return revision(connection) if inspect(connection).has_table("alembic_version") else None


def sqlite_revision(connection: sqlite3.Connection) -> str | None:
    """The revision of a SQLite file, ``None`` if it holds no ``alembic_version`` (or is no database)."""
    try:
        row = connection.execute("SELECT version_num FROM alembic_version").fetchone()
    except sqlite3.DatabaseError:
        return None
    return row[0] if row else None


def sqlite_integrity(connection: sqlite3.Connection) -> str:
    """SQLite's ``PRAGMA integrity_check`` verdict: ``"ok"`` or the first problems found."""
    (verdict,) = connection.execute("PRAGMA integrity_check").fetchone()
    return verdict


def sqlite_journal_mode(connection: sqlite3.Connection, mode: str) -> None:
    """``DELETE`` for a self-contained copy (no ``-wal`` beside it), ``WAL`` for what the service runs."""
    if mode not in {"DELETE", "WAL"}:
        raise ValueError(f"journal mode {mode!r} is not one we use")
    connection.execute(f"PRAGMA journal_mode={mode}")


def sqlite_plan_count(connection: sqlite3.Connection) -> int:
    return connection.execute("SELECT count(*) FROM plans").fetchone()[0]
