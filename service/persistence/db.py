"""Engine, sessions and the per-request session.

SQLite: every connection gets WAL, ``busy_timeout``, ``foreign_keys=ON`` and ``synchronous=FULL``,
and every transaction starts with ``BEGIN IMMEDIATE`` so that concurrent writers queue on the busy
handler instead of failing on the read→write lock upgrade (measured in
shared/reference/conventions-and-reliability.md B.5). PostgreSQL gets ``pool_pre_ping``.
Nothing connects until the first request (engines are lazy; safe under gunicorn's fork).

A second, autocommit engine serves :func:`read_one`: the single SELECTs that run on (nearly) every
request — a token lookup, the trips change marker. One statement sees one consistent snapshot by
itself on both databases, so it needs no BEGIN/ROLLBACK, no ORM session and no pre-ping round
trip; on PostgreSQL that is one round trip instead of four (``benchmarks/reads.py`` printed 0.38 ms
against 1.46 ms per marker read on this machine, SQLite 0.16 ms against 0.40 ms).
"""

from __future__ import annotations

import contextlib
import sqlite3
from collections.abc import Callable, Iterator, Mapping
from contextvars import ContextVar
from pathlib import Path
from typing import Any, TypeVar

from flask import Flask, current_app, g, has_request_context, request
from sqlalchemy import Engine, Executable, Row, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session, sessionmaker

T = TypeVar("T")
SQLITE_BUSY_TIMEOUT_MS = 5000
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})

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


class RawRead:
    """One prebuilt SELECT, compiled once per dialect and run straight on a pooled DBAPI connection.

    For the one statement that runs on every weekly-trips call (the change marker): SQLAlchemy's
    statement execution costs more than the query itself (``benchmarks/reads.py`` printed 0.21 ms
    against 0.38 ms on PostgreSQL, 0.05 against 0.16 ms on SQLite). The row holds the driver's own
    values, untouched by column types, so it suits values that are only compared for equality.
    Driver errors, a failed connect included, come out as SQLAlchemy's ``DBAPIError`` like any
    other (→ 503).
    """

    def __init__(self, statement: Executable) -> None:
        self.statement = statement
        self._compiled: dict[str, Any] = {}

    def first(self, engine: Engine, params: Mapping[str, Any]) -> tuple[Any, ...] | None:
        compiled = self._compiled.get(engine.dialect.name)
        if compiled is None:
            compiled = self._compiled.setdefault(engine.dialect.name, self.statement.compile(dialect=engine.dialect))
        values = compiled.construct_params(params)
        args = tuple(values[name] for name in compiled.positiontup) if compiled.positional else values
        return _retry_once_if_gone(engine, lambda: _raw_first(engine, compiled.string, args))


def _raw_first(engine: Engine, sql: str, args: Any) -> tuple[Any, ...] | None:
    dbapi_error = engine.dialect.loaded_dbapi.Error
    try:
        connection = engine.raw_connection()
    except dbapi_error as exc:
        # The pool's connect raises the driver's own error (``Engine.connect`` would wrap it);
        # wrapped here, a database that is down answers 503 on this path too, not 500.
        raise DBAPIError.instance(None, None, exc, dbapi_error, dialect=engine.dialect) from exc
    try:
        cursor = connection.cursor()
        try:
            cursor.execute(sql, args)
            return cursor.fetchone()
        finally:
            cursor.close()
    except dbapi_error as exc:
        gone = engine.dialect.is_disconnect(exc, connection.dbapi_connection, None)
        if gone:
            connection.invalidate(exc)
        raise DBAPIError.instance(
            sql, args, exc, dbapi_error, connection_invalidated=gone, dialect=engine.dialect
        ) from exc
    finally:
        connection.close()


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


def read_engine() -> Engine:
    """The current app's engine for :func:`read_one`."""
    return current_app.extensions["ullage.read_engine"]


def dispose(app: Flask) -> None:
    """Close every pooled connection of ``app`` (both engines)."""
    app.extensions["ullage.engine"].dispose()
    app.extensions["ullage.read_engine"].dispose()


def init_app(app: Flask) -> None:
    """Create the (lazy) engine and session factory and close the request's session at teardown."""
    engine = make_engine(app.config["DATABASE_URL"])
    app.extensions["ullage.engine"] = engine
    app.extensions["ullage.read_engine"] = make_read_engine(app.config["DATABASE_URL"])
    app.extensions["ullage.sessionmaker"] = sessionmaker(engine, expire_on_commit=False)
    app.teardown_appcontext(_close_session)


def get_session() -> Session:
    """The session of the current request (opened on first use)."""
    if "db_session" not in g:
        write_intent.set(not has_request_context() or request.method not in SAFE_METHODS)
        g.db_session = current_app.extensions["ullage.sessionmaker"]()
    return g.db_session


@contextlib.contextmanager
def read_session() -> Iterator[Session]:
    """A session of its own that only reads (SQLite: a deferred ``BEGIN``, never the write lock),
    for a read that must not hold the request's write transaction open, e.g. while planning."""
    intent = write_intent.set(False)
    session = current_app.extensions["ullage.sessionmaker"]()
    try:
        yield session
    finally:
        session.close()
        write_intent.reset(intent)


def rollback_request_session() -> None:
    """Abandon whatever the request's session has open; a dead connection is dropped instead."""
    session = g.get("db_session")
    if session is not None:
        try:
            session.rollback()
        except Exception:  # noqa: BLE001 - the connection may already be gone (database restarted)
            session.invalidate()


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
