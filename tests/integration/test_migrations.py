"""The Alembic chain: upgrade from empty, no drift against the models, downgrade/upgrade round trip."""

from __future__ import annotations

from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from sqlalchemy import create_engine, inspect

from service.health import alembic_config, migration_head
from service.persistence.models import Base


def test_upgrade_from_empty_has_no_drift(database_url):
    engine = create_engine(database_url)
    try:
        with engine.connect() as conn:
            diff = compare_metadata(MigrationContext.configure(conn), Base.metadata)
            current = MigrationContext.configure(conn).get_current_revision()
    finally:
        engine.dispose()
    assert diff == []
    assert current == migration_head()


def test_downgrade_then_upgrade_round_trip(database_url):
    config = alembic_config(database_url)
    command.downgrade(config, "base")
    engine = create_engine(database_url)
    try:
        assert set(inspect(engine).get_table_names()) <= {"alembic_version"}
        command.upgrade(config, "head")
        engine.dispose()
        assert {t.name for t in Base.metadata.sorted_tables} <= set(inspect(engine).get_table_names())
    finally:
        engine.dispose()
