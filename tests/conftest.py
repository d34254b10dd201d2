"""Shared fixtures: every database test runs on SQLite and on PostgreSQL.

PostgreSQL comes from ``TEST_POSTGRES_URL`` (or ``DATABASE_URL``) when it names a PostgreSQL
database; ``.ci/run`` sets it. That database is only used to create this process's own database
``<name>_<pid>`` (dropped at the end), so parallel runs on one server do not disturb each other.
With ``CI`` set, a missing or unreachable PostgreSQL is a failure, never a skip.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from pathlib import Path

import pytest
from alembic import command
from sqlalchemy import create_engine, event, text
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session

from service import create_app
from service.auth import new_token, token_hash
from service.config import MAX_TOKEN_CACHE_SECONDS, normalise_database_url
from service.demo import SAMPLE_DATA, load_demo
from service.health import alembic_config
from service.persistence import repository as repo
from service.persistence.models import Base
from service.request_db import dispose

ROOT = Path(__file__).resolve().parent.parent
ROLES = ("viewer", "dispatcher", "admin")
NO_TOKEN_LIMITS = {"ULLAGE_PLANNING_PER_MINUTE": 0, "ULLAGE_HEAVY_READS_PER_MINUTE": 0}


def postgres_url() -> str | None:
    for name in ("TEST_POSTGRES_URL", "DATABASE_URL"):
        url = os.environ.get(name, "")
        if url.startswith(("postgres://", "postgresql")):
            return normalise_database_url(url)
    return None


def _unavailable(reason: str) -> None:
    if os.environ.get("CI"):
        pytest.fail(f"PostgreSQL is required in CI: {reason}")
    pytest.skip(reason)


@pytest.fixture(scope="session")
def pg_migrated() -> Iterator[str]:
    """A PostgreSQL database of this pytest process only, migrated to head, dropped at the end.

    Several people (and CI jobs) share one PostgreSQL server, so the database named in
    ``TEST_POSTGRES_URL`` is used only to create ``<name>_<pid>`` next to it (autocommit connection);
    nothing in the named database itself is touched.
    """
    url = postgres_url()
    if url is None:
        _unavailable("set TEST_POSTGRES_URL to a PostgreSQL database to run the PostgreSQL half")
    base = make_url(url)
    own = base.set(database=f"{base.database or 'postgres'}_{os.getpid()}")
    admin = create_engine(base, isolation_level="AUTOCOMMIT")
    try:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{own.database}"'))
            conn.execute(text(f'CREATE DATABASE "{own.database}"'))
    except Exception as exc:  # noqa: BLE001
        admin.dispose()
        _unavailable(f"PostgreSQL not reachable or CREATE DATABASE refused ({type(exc).__name__})")
    own_url = own.render_as_string(hide_password=False)
    try:
        command.upgrade(alembic_config(own_url), "head")
        yield own_url
    finally:
        try:
            with admin.connect() as conn:
                conn.execute(text(f'DROP DATABASE IF EXISTS "{own.database}" WITH (FORCE)'))
        finally:
            admin.dispose()


@pytest.fixture(scope="session")
def sqlite_template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("template") / "template.db"
    command.upgrade(alembic_config(f"sqlite:///{path}"), "head")
    return path


def _truncate_postgres(url: str) -> None:
    engine = create_engine(url)
    try:
        with engine.begin() as conn:
            tables = ", ".join(t.name for t in Base.metadata.sorted_tables)
            conn.execute(text(f"TRUNCATE {tables} RESTART IDENTITY CASCADE"))
    finally:
        engine.dispose()


@pytest.fixture(params=["sqlite", "postgresql"])
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """A migrated, empty database of each kind."""
    if request.param == "sqlite":
        path = tmp_path / "ullage.db"
        shutil.copy(request.getfixturevalue("sqlite_template"), path)
        return f"sqlite:///{path}"
    url = request.getfixturevalue("pg_migrated")
    _truncate_postgres(url)
    return url


@pytest.fixture
def app(database_url: str):
    # No per-token limits (service.bounded) here: many tests plan in loops with one token; the
    # limits are tested with their own settings (tests/api/test_bounded.py and others).
    application = create_app({"DATABASE_URL": database_url, "TESTING": True, **NO_TOKEN_LIMITS})
    yield application
    dispose(application)


@pytest.fixture
def client(app):
    return app.test_client()


@pytest.fixture
def expire_token_cache(monkeypatch: pytest.MonkeyPatch):
    """Call it to move the token cache's clock past every entry's lifetime (instead of sleeping)."""
    import service.auth as auth  # noqa: PLC0415

    real, shift = auth._clock, [0.0]

    def expire() -> None:
        shift[0] += MAX_TOKEN_CACHE_SECONDS + 1
        monkeypatch.setattr(auth, "_clock", lambda: real() + shift[0])

    return expire


def _observer_engine(url: str):
    """A plain engine on ``url`` for tests to look behind the API.

    It has none of the app's SQLite transaction handling: pysqlite then runs a SELECT outside any
    transaction and opens a deferred one only for writes, so reading here never holds a lock or an
    old snapshot that would make the next API request wait out busy_timeout.
    """
    if not url.startswith("sqlite"):
        return create_engine(url)
    engine = create_engine(url)

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection, _record):  # type: ignore[no-untyped-def]
        dbapi_connection.execute("PRAGMA foreign_keys=ON")

    return engine


@pytest.fixture
def db_session(app) -> Iterator[Session]:
    """A separate session on the app's database, to look behind the API (reads see every commit)."""
    engine = _observer_engine(app.config["DATABASE_URL"])
    try:
        with Session(engine, expire_on_commit=False) as session:
            yield session
    finally:
        engine.dispose()


@pytest.fixture
def tokens(db_session: Session) -> dict[str, str]:
    """One fresh token per role."""
    out = {}
    for role in ROLES:
        token = new_token()
        repo.add_token(db_session, f"test-{role}", role, token_hash(token))
        out[role] = token
    db_session.commit()
    return out


@pytest.fixture
def auth(tokens: dict[str, str]):
    def headers(role: str = "admin", **extra: str) -> dict[str, str]:
        return {"Authorization": f"Bearer {tokens[role]}", **extra}

    return headers


@pytest.fixture
def demo(app, db_session: Session) -> None:
    """The invented demo network of service/sample_data/."""
    load_demo(db_session, SAMPLE_DATA, app.config["ULLAGE_SETTINGS"].quantity_unit)
    db_session.commit()
