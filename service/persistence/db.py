"""Engine, sessions and the per-request session.

SQLite: every connection gets WAL, ``busy_timeout``, ``foreign_keys=ON`` and ``synchronous=FULL``,
and every transaction starts with ``BEGIN IMMEDIATE`` so that concurrent writers queue on the busy
handler instead of failing on the read→write lock upgrade (measured in
shared/reference/conventions-and-reliability.md B.5). PostgreSQL gets ``pool_pre_ping``.
Nothing connects until the first request (engines are lazy; safe under gunicorn's fork).
"""

from __future__ import annotations

from contextvars import ContextVar
from pathlib import Path

from flask import Flask, current_app, g, has_request_context, request
from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker

SQLITE_BUSY_TIMEOUT_MS = 5000
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})

#: Whether the current unit of work may write (SQLite then starts it with BEGIN IMMEDIATE;
#: read-only requests keep SQLite's deferred BEGIN and never wait for writers under WAL).
write_intent: ContextVar[bool] = ContextVar("write_intent", default=True)


def make_engine(url: str) -> Engine:
    """Create the engine for ``url`` with the per-backend settings above."""
    parsed = make_url(url)
    if parsed.get_backend_name() == "sqlite":
        if parsed.database and parsed.database != ":memory:":
            Path(parsed.database).parent.mkdir(parents=True, exist_ok=True)
        engine = create_engine(url, connect_args={"timeout": SQLITE_BUSY_TIMEOUT_MS / 1000})
        _configure_sqlite(engine)
        return engine
    return create_engine(
        url,
        pool_pre_ping=True,
        pool_size=5,
        max_overflow=5,
        pool_timeout=5,
        connect_args={"connect_timeout": 3},
    )


def _configure_sqlite(engine: Engine) -> None:
    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection, _record):  # type: ignore[no-untyped-def]
        # Take transaction control away from the sqlite3 module so BEGIN IMMEDIATE is ours.
        dbapi_connection.isolation_level = None
        cursor = dbapi_connection.cursor()
        cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
        cursor.execute("PRAGMA foreign_keys=ON")
        cursor.execute("PRAGMA synchronous=FULL")
        cursor.close()

    @event.listens_for(engine, "begin")
    def _on_begin(connection):  # type: ignore[no-untyped-def]
        connection.exec_driver_sql("BEGIN IMMEDIATE" if write_intent.get() else "BEGIN")


def is_sqlite(session: Session) -> bool:
    """True when the session talks to SQLite."""
    return session.get_bind().dialect.name == "sqlite"


def init_app(app: Flask) -> None:
    """Create the (lazy) engine and session factory and close the request's session at teardown."""
    engine = make_engine(app.config["DATABASE_URL"])
    app.extensions["ullage.engine"] = engine
    app.extensions["ullage.sessionmaker"] = sessionmaker(engine, expire_on_commit=False)
    app.teardown_appcontext(_close_session)


def get_session() -> Session:
    """The session of the current request (opened on first use)."""
    if "db_session" not in g:
        write_intent.set(not has_request_context() or request.method not in SAFE_METHODS)
        g.db_session = current_app.extensions["ullage.sessionmaker"]()
    return g.db_session


def _close_session(_exc: BaseException | None) -> None:
    session = g.pop("db_session", None)
    if session is not None:
        try:
            session.close()
        except Exception:  # noqa: BLE001 - e.g. PostgreSQL restarted: the ROLLBACK of close() fails
            # Raising from teardown would replace the answer already built with gunicorn's HTML 500
            # (found by the PostgreSQL-restart fault test); drop the dead connection instead.
            session.invalidate()
    write_intent.set(True)
