"""``/livez`` (no I/O) and ``/readyz`` (database reachable and at the migration head)."""

from __future__ import annotations

from pathlib import Path

from alembic.config import Config
from alembic.script import ScriptDirectory
from flask import Blueprint, Flask, current_app, jsonify

from service.auth import PUBLIC, allow
from service.errors import problem_response
from service.persistence import schema
from service.persistence.db import write_intent

#: The Alembic chain ships inside the package, so an installed wheel can migrate.
MIGRATIONS = Path(__file__).resolve().parent / "migrations"
bp = Blueprint("health", __name__)


def alembic_config(url: str | None = None) -> Config:
    """An Alembic config pointing at our migrations (URL handed over as an attribute, not parsed)."""
    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS))
    if url:
        config.attributes["database_url"] = url
    return config


def migration_head() -> str | None:
    return ScriptDirectory.from_config(alembic_config()).get_current_head()


@bp.get("/livez")
@allow(PUBLIC)
def livez():
    """The process answers (no I/O)."""
    return jsonify(status="pass")


@bp.get("/readyz")
@allow(PUBLIC)
def readyz():
    """The database answers and is at the migration head."""
    engine = current_app.extensions["ullage.engine"]
    intent = write_intent.set(False)  # a read: SQLite's deferred BEGIN, never queued behind writers
    try:
        with engine.connect() as conn:
            current = schema.revision(conn)
    except Exception:  # noqa: BLE001 - any failure means not ready; details stay in the logs
        current_app.logger.warning("readiness: database not reachable")
        return problem_response(503, "The database is not reachable.", kind="not-ready", headers={"Retry-After": "2"})
    finally:
        write_intent.reset(intent)
    if current != current_app.extensions["ullage.migration_head"]:
        return problem_response(
            503,
            "The database schema is not at the expected migration; run `ullage db upgrade`.",
            kind="not-ready",
            headers={"Retry-After": "10"},
        )
    return jsonify(status="pass")


def init_app(app: Flask) -> None:
    app.extensions["ullage.migration_head"] = migration_head()
    app.register_blueprint(bp)
