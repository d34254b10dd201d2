"""Shared fixtures: every database test runs on SQLite and on PostgreSQL.

PostgreSQL comes from ``DATABASE_URL`` (or ``TEST_POSTGRES_URL``) when it names a PostgreSQL
database; ``.ci/run`` sets it. With ``CI`` set, a missing or unreachable PostgreSQL is a failure,
never a skip.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from pathlib import Path

import pytest
from alembic import command
from sqlalchemy import create_engine, text
from sqlalchemy.orm import Session

from service import create_app
from service.auth import new_token, token_hash
from service.config import normalise_database_url
from service.demo import load_demo
from service.health import alembic_config
from service.persistence import repository as repo
from service.persistence.models import Base

ROOT = Path(__file__).resolve().parent.parent
ROLES = ("viewer", "dispatcher", "admin")


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
    url = postgres_url()
    if url is None:
        _unavailable("set DATABASE_URL to a PostgreSQL database to run the PostgreSQL half")
    engine = create_engine(url)
    try:
        with engine.begin() as conn:
            conn.execute(text("DROP SCHEMA public CASCADE"))
            conn.execute(text("CREATE SCHEMA public"))
    except Exception as exc:  # noqa: BLE001
        _unavailable(f"PostgreSQL not reachable ({type(exc).__name__})")
    finally:
        engine.dispose()
    command.upgrade(alembic_config(url), "head")
    yield url


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
    application = create_app({"DATABASE_URL": database_url, "TESTING": True})
    yield application
    application.extensions["ullage.engine"].dispose()


@pytest.fixture
def client(app):
    return app.test_client()


@pytest.fixture
def db_session(app) -> Iterator[Session]:
    """A separate session on the app's database, to look behind the API."""
    with Session(app.extensions["ullage.engine"], expire_on_commit=False) as session:
        yield session


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
    """The invented demo network of sample_data/."""
    load_demo(db_session, ROOT / "sample_data", app.config["ULLAGE_SETTINGS"].quantity_unit)
    db_session.commit()
