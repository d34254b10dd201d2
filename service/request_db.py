"""The request's database session: the Flask side of ``service.persistence.db``.

One session per request, opened on first use and closed at teardown (SQLAlchemy's rule: keep the
session's lifecycle outside the functions that touch data; they take the session as an argument).
A GET's session never asks for SQLite's write lock (``persistence.db.write_intent``).
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator

from flask import Flask, current_app, g, has_request_context, request
from sqlalchemy import Engine
from sqlalchemy.orm import Session, sessionmaker

from service.persistence.db import make_engine, make_read_engine, write_intent

SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})


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
