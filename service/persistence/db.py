"""Engines and their per-backend settings; the autocommit single reads. No Flask here:
the per-request session lives in ``service/request_db.py``.

SQLite: every connection gets WAL, ``busy_timeout``, ``foreign_keys=ON`` and ``synchronous=FULL``,
and every transaction starts with ``BEGIN IMMEDIATE`` so that concurrent writers queue on the busy
handler instead of failing on the read→write lock upgrade, which a deferred ``BEGIN`` can hit
after it has read (SQLite answers SQLITE_BUSY at once there; the busy handler does not apply). PostgreSQL gets ``pool_pre_ping``.
Nothing connects until the first request (engines are lazy; safe under gunicorn's fork).

A second, autocommit engine serves :func:`read_one`: the single SELECTs that run on (nearly) every
request — a token lookup, the trips change marker. One statement sees one consistent snapshot by
itself on both databases, so it needs no BEGIN/ROLLBACK, no ORM session and no pre-ping round
trip; on PostgreSQL that is one round trip instead of four (``benchmarks/reads.py`` printed 0.38 ms
against 1.46 ms per marker read on this machine, SQLite 0.16 ms against 0.40 ms).
"""

from __future__ import annotations

import sqlite3
from collections.abc import Callable, Mapping
from contextvars import ContextVar
from pathlib import Path
from typing import Any, TypeVar

from sqlalchemy import Engine, Executable, Row, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.exc import DBAPIError

T = TypeVar("T")
SQLITE_BUSY_TIMEOUT_MS = 5000

#: Whether the current unit of work may write (SQLite then starts it with BEGIN IMMEDIATE;
#: read-only requests keep SQLite's deferred BEGIN and never wait for writers under WAL).
write_intent: ContextVar[bool] = ContextVar("write_intent", default=True)


def make_engine(url: str) -> Engine:
    """Create the engine for ``url`` with the per-backend settings above."""
    engine = _engine(url, sqlite={}, postgresql={"pool_pre_ping": True, "pool_size": 5, "max_overflow": 5})
    if engine.dialect.name == "sqlite":
        event.listen(engine, "begin", _sqlite_begin)
    return engine


def make_read_engine(url: str) -> Engine:
    """The engine of :func:`read_one`: autocommit, nothing to reset on return, no pre-ping."""
    options = {"isolation_level": "AUTOCOMMIT", "pool_reset_on_return": None}
    return _engine(url, sqlite=options, postgresql={**options, "pool_size": 4, "max_overflow": 4})


def _engine(url: str, *, sqlite: dict[str, Any], postgresql: dict[str, Any]) -> Engine:
    """An engine with what both of ours share: SQLite's busy timeout and pragmas, PostgreSQL's timeouts."""
    parsed = make_url(url)
    if parsed.get_backend_name() != "sqlite":
        return create_engine(url, pool_timeout=5, connect_args={"connect_timeout": 3}, **postgresql)
    if parsed.database and parsed.database != ":memory:":
        Path(parsed.database).parent.mkdir(parents=True, exist_ok=True)
    engine = create_engine(url, connect_args={"timeout": SQLITE_BUSY_TIMEOUT_MS / 1000}, **sqlite)
    event.listen(engine, "connect", _sqlite_pragmas)
    return engine


def _sqlite_pragmas(dbapi_connection, _record):  # type: ignore[no-untyped-def]
    # Take transaction control away from the sqlite3 module so BEGIN IMMEDIATE is ours.
    dbapi_connection.isolation_level = None
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA journal_mode=WAL")
    cursor.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.execute("PRAGMA synchronous=FULL")
    cursor.close()


def _sqlite_begin(connection):  # type: ignore[no-untyped-def]
    # Straight to the driver: this runs once per transaction, and a Core statement costs more.
    statement = "BEGIN IMMEDIATE" if write_intent.get() else "BEGIN"
    try:
        connection.connection.driver_connection.execute(statement)
    except sqlite3.Error as exc:
        # SQLAlchemy runs "begin" listeners outside its own error wrapping, so a write lock held
        # past busy_timeout ("database is locked") would escape as a bare driver error (a 500);
        # wrapped like any other, it answers 503 with Retry-After (service.errors).
        raise DBAPIError.instance(statement, (), exc, sqlite3.Error, dialect=connection.dialect) from exc


def sqlite_write_lock_held(engine: Engine) -> bool:
    """Whether some connection holds the SQLite database's write lock right now.

    A ``BEGIN IMMEDIATE`` that does not wait (``busy_timeout`` 0 for that one statement) on a pooled
    connection, rolled back at once. A transaction started by the app holds the lock from its
    first statement to its commit, so a request that is still working proves it is alive.
    """
    connection = engine.raw_connection()
    driver = connection.driver_connection
    assert driver is not None  # a checked-out pool connection wraps a live DBAPI connection
    try:
        driver.execute("PRAGMA busy_timeout=0")
        try:
            driver.execute("BEGIN IMMEDIATE")
        except engine.dialect.loaded_dbapi.OperationalError as exc:
            if "locked" not in str(exc) and "busy" not in str(exc):
                raise
            return True
        driver.execute("ROLLBACK")
        return False
    finally:
        driver.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
        connection.close()


def read_one(engine: Engine, statement: Executable, params: Mapping[str, Any]) -> Row[Any] | None:
    """The only row of one prebuilt SELECT (or ``None``), run on the autocommit ``engine``."""
    return _retry_once_if_gone(engine, lambda: _read(engine, statement, params))


def _read(engine: Engine, statement: Executable, params: Mapping[str, Any]) -> Row[Any] | None:
    with engine.connect() as connection:
        return connection.execute(statement, params).one_or_none()


def _retry_once_if_gone(engine: Engine, read: Callable[[], T]) -> T:
    """Run ``read``; if its connection turned out dead (the server restarted), once more.

    The autocommit engine has no pre-ping, so a connection that died with the server shows up here;
    the pool is then replaced (``Engine.dispose``: its other connections are just as dead) and the
    read tried on a fresh connection, SQLAlchemy's "optimistic" disconnect handling. A database
    that is still down raises as usual (→ 503).
    """
    try:
        return read()
    except DBAPIError as exc:
        if not exc.connection_invalidated:
            raise
        engine.dispose()
        return read()
