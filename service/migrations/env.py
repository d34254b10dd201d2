"""Alembic environment: the URL comes from service.config (DATABASE_URL), never from a file.

The URL is handed to SQLAlchemy directly (not through configparser), so percent-encoded passwords
are safe (alembic#1489). Batch mode is on because SQLite is a target.
"""

from __future__ import annotations

from alembic import context

from service.config import load_settings
from service.persistence.db import make_engine
from service.persistence.models import Base

target_metadata = Base.metadata


def _url() -> str:
    configured = context.config.attributes.get("database_url")
    return configured or load_settings().database_url


def run_migrations_offline() -> None:
    """Emit SQL to stdout without a connection."""
    context.configure(url=_url(), target_metadata=target_metadata, literal_binds=True, render_as_batch=True)
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    """Run against a live connection."""
    connection = context.config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    engine = make_engine(_url())
    try:
        with engine.connect() as conn:
            _run(conn)
    finally:
        engine.dispose()


def _run(connection) -> None:  # type: ignore[no-untyped-def]
    context.configure(connection=connection, target_metadata=target_metadata, render_as_batch=True)
    with context.begin_transaction():
        context.run_migrations()
    connection.commit()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()
