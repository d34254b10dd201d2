"""The Alembic chain: upgrade from empty, no drift against the models, downgrade/upgrade round trip."""

from __future__ import annotations

import datetime as dt

import pytest
from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from sqlalchemy import create_engine, inspect, select, text
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.health import alembic_config, migration_head
from service.persistence import plans as plan_store
from service.persistence.models import Base, Truck


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


def test_0005_gives_existing_trucks_the_default_calendar_and_keeps_the_change_stamp(database_url):
    """Issue 13: a truck stored before calendars works Monday to Friday, one trip a day, no closed
    dates, no holiday region; its table still moves the change stamp (SQLite's triggers survive)."""
    config = alembic_config(database_url)
    command.downgrade(config, "0004")
    engine = create_engine(database_url)
    try:
        with engine.begin() as conn:
            conn.execute(
                text(
                    "INSERT INTO trucks (code, name, dispatch_cost, capacity, max_stops, active, version, created_at,"
                    " updated_at) VALUES ('OLD-1', 'Old truck', 100, 9000, NULL, :yes, 1, :now, :now)"
                ),
                {"yes": True, "now": dt.datetime(2026, 12, 1, tzinfo=dt.UTC)},
            )
            conn.execute(
                text(
                    "INSERT INTO sites (code, name, truck_id, demand_per_day, holding_cost, stop_cost, tank_capacity,"
                    " safe_fill, safety_stock, active, version, created_at, updated_at) SELECT 'OLD-S', 'Old site',"
                    " id, 100, 0.01, 5, 5000, 0.9, 0, :yes, 1, :now, :now FROM trucks WHERE code = 'OLD-1'"
                ),
                {"yes": True, "now": dt.datetime(2026, 12, 1, tzinfo=dt.UTC)},
            )
        command.upgrade(config, "head")
        engine.dispose()
        with Session(engine) as session:
            old = session.scalars(select(Truck).where(Truck.code == "OLD-1")).one()
            assert old.working_days == [1, 2, 3, 4, 5]
            assert old.trips_per_day == 1
            assert old.closed_dates == []
            assert old.holiday_region is None
            assert old.version == 1  # the migration is not an edit: no recorded plan turns stale
        before = plan_store.change_stamp(engine)
        with engine.begin() as conn:
            conn.execute(text("UPDATE trucks SET trips_per_day = 2 WHERE code = 'OLD-1'"))
        assert plan_store.change_stamp(engine) != before
        with pytest.raises(IntegrityError), engine.begin() as conn:  # ck_trucks_trips_per_day_range
            conn.execute(text("UPDATE trucks SET trips_per_day = 25 WHERE code = 'OLD-1'"))
    finally:
        engine.dispose()


def test_0007_gives_existing_sites_no_weather_region_and_keeps_the_change_stamp(database_url):
    """Issue 15: a site stored before weather has no region and base 15.5 °C; sites (columns added
    in place, not rebuilt) and the new weather_days table both move the change stamp."""
    config = alembic_config(database_url)
    command.downgrade(config, "0005")
    engine = create_engine(database_url)
    now = dt.datetime(2026, 12, 1, tzinfo=dt.UTC)
    try:
        with engine.begin() as conn:
            conn.execute(
                text(
                    "INSERT INTO trucks (code, name, dispatch_cost, capacity, max_stops, active, version, created_at,"
                    " updated_at) VALUES ('OLD-1', 'Old truck', 100, 9000, NULL, :yes, 1, :now, :now)"
                ),
                {"yes": True, "now": now},
            )
            conn.execute(
                text(
                    "INSERT INTO sites (code, name, truck_id, demand_per_day, holding_cost, stop_cost, tank_capacity,"
                    " safe_fill, safety_stock, active, version, created_at, updated_at) SELECT 'OLD-S', 'Old site',"
                    " id, 100, 0.01, 5, 5000, 0.9, 0, :yes, 1, :now, :now FROM trucks WHERE code = 'OLD-1'"
                ),
                {"yes": True, "now": now},
            )
        command.upgrade(config, "head")
        engine.dispose()
        with engine.connect() as conn:
            row = conn.execute(text("SELECT weather_region, base_temperature, version FROM sites")).one()
        assert tuple(row) == (None, 15.5, 1)
        before = plan_store.change_stamp(engine)
        with engine.begin() as conn:
            conn.execute(text("UPDATE sites SET weather_region = 'NW' WHERE code = 'OLD-S'"))
        after_site = plan_store.change_stamp(engine)
        assert after_site != before
        with engine.begin() as conn:
            conn.execute(
                text(
                    "INSERT INTO weather_days (region, day, mean_temperature, source, created_at, created_by)"
                    " VALUES ('NW', :day, 4.5, 'observed', :now, 'test')"
                ),
                {"day": dt.date(2026, 11, 30), "now": now},
            )
        after_weather = plan_store.change_stamp(engine)
        assert after_weather != after_site
        with engine.begin() as conn:
            conn.execute(text("UPDATE weather_days SET mean_temperature = 2.0"))
        assert plan_store.change_stamp(engine) != after_weather
        with pytest.raises(IntegrityError), engine.begin() as conn:  # ck_sites_base_temperature_range
            conn.execute(text("UPDATE sites SET base_temperature = 80 WHERE code = 'OLD-S'"))
        with pytest.raises(IntegrityError), engine.begin() as conn:  # uq_weather_days_region_day
            conn.execute(
                text(
                    "INSERT INTO weather_days (region, day, mean_temperature, source, created_at, created_by)"
                    " VALUES ('NW', :day, 1.0, 'forecast', :now, 'test')"
                ),
                {"day": dt.date(2026, 11, 30), "now": now},
            )
    finally:
        engine.dispose()
