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
from service.persistence import db
from service.persistence import plans as plan_store
from service.persistence.models import Base, Site, Truck


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


def _old_rows_then_head(config, engine, now: dt.datetime) -> None:
    """Store truck ``OLD-1`` and its site ``OLD-S`` at the current (downgraded) revision, then upgrade
    to head and dispose of the engine's connections."""
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


def test_0005_gives_existing_trucks_the_default_calendar_and_keeps_the_change_stamp(database_url):
    """Issue 13: a truck stored before calendars works Monday to Friday, one trip a day, no closed
    dates, no holiday region; its table still moves the change stamp (SQLite's triggers survive)."""
    config = alembic_config(database_url)
    command.downgrade(config, "0004")
    engine = create_engine(database_url)
    try:
        _old_rows_then_head(config, engine, dt.datetime(2026, 12, 1, tzinfo=dt.UTC))
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


def test_the_migration_chain_and_the_demo_data_have_one_home():
    """Inside the package (issue 17): the alembic command (pyproject's [tool.alembic]), the service
    (``ullage db upgrade``, /readyz) and an installed wheel all use ``service/migrations``."""
    import subprocess
    from pathlib import Path

    from alembic.config import Config
    from alembic.script import ScriptDirectory

    from service.demo import SAMPLE_DATA
    from service.health import MIGRATIONS

    root = Path(__file__).resolve().parents[2]
    package = root / "service"
    assert MIGRATIONS == package / "migrations" and SAMPLE_DATA == package / "sample_data"
    assert not (root / "migrations").exists() and not (root / "sample_data").exists()
    tracked = subprocess.run(["git", "ls-files"], cwd=root, capture_output=True, text=True, check=True).stdout.split()
    homes = {Path(name).parent for name in tracked if Path(name).name in ("env.py", "script.py.mako")}
    assert homes == {Path("service/migrations")}
    assert {Path(name).parent for name in tracked if name.endswith(".csv") and "sample" in name} == {
        Path("service/sample_data")
    }
    cli = ScriptDirectory.from_config(Config(toml_file=str(root / "pyproject.toml")))
    assert Path(cli.dir).resolve() == MIGRATIONS
    files = sorted((MIGRATIONS / "versions").glob("*.py"))
    assert len(files) == len(list(cli.walk_revisions())) and cli.get_heads() == [migration_head()]


def test_0006_defaults_and_every_watched_table_still_moves_the_change_stamp(database_url):
    """Issue 15: a truck stored before 0006 starts its shift at 06:00, a site has no service level and
    a lead time of one day; sites, trucks and the new deliveries table each move the change stamp
    (SQLite's triggers survive the added columns), and the new CHECKs hold."""
    config = alembic_config(database_url)
    command.downgrade(config, "0005")
    engine = create_engine(database_url)
    now = dt.datetime(2026, 12, 1, tzinfo=dt.UTC)
    try:
        _old_rows_then_head(config, engine, now)
        with Session(engine) as session:
            old = session.scalars(select(Truck).where(Truck.code == "OLD-1")).one()
            site = session.scalars(select(Site).where(Site.code == "OLD-S")).one()
            assert old.shift_start == dt.time(6, 0)
            assert site.service_level is None
            assert site.lead_time_days == 1.0
        for statement in (
            "UPDATE sites SET service_level = 0.98 WHERE code = 'OLD-S'",
            "UPDATE trucks SET shift_start = '07:30:00' WHERE code = 'OLD-1'",
            "INSERT INTO deliveries (site_id, quantity, delivered_at, created_at, created_by)"
            " SELECT id, 500, :now, :now, 'test' FROM sites WHERE code = 'OLD-S'",
        ):
            before = plan_store.change_stamp(engine)
            with engine.begin() as conn:
                conn.execute(text(statement), {"now": now})
            assert plan_store.change_stamp(engine) != before, statement
        for statement in (
            "UPDATE sites SET service_level = 1 WHERE code = 'OLD-S'",  # ck_sites_service_level_fraction
            "UPDATE sites SET lead_time_days = -1 WHERE code = 'OLD-S'",  # ck_sites_lead_time_nonnegative
            "UPDATE deliveries SET quantity = 0",  # ck_deliveries_quantity_positive
        ):
            with pytest.raises(IntegrityError), engine.begin() as conn:
                conn.execute(text(statement))
    finally:
        engine.dispose()

def test_0007_gives_existing_sites_no_weather_region_and_keeps_the_change_stamp(database_url):
    """Issue 15: a site stored before weather has no region and base 15.5 °C; sites (columns added
    in place, not rebuilt) and the new weather_days table both move the change stamp."""
    config = alembic_config(database_url)
    command.downgrade(config, "0006")
    engine = create_engine(database_url)
    now = dt.datetime(2026, 12, 1, tzinfo=dt.UTC)
    try:
        _old_rows_then_head(config, engine, now)
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


def test_0008_gives_existing_trucks_and_sites_fleet_defaults_and_keeps_the_change_stamp(database_url):
    """Issue 16: a truck stored before the fleet level has no depot, cost per km 0, no compartments
    and no product list, a site no product; trucks and sites (columns added in place, not rebuilt)
    and the new depots and products tables all move the change stamp; the references hold."""
    config = alembic_config(database_url)
    command.downgrade(config, "0007")
    engine = create_engine(database_url)
    now = dt.datetime(2026, 12, 1, tzinfo=dt.UTC)
    try:
        _old_rows_then_head(config, engine, now)
        with engine.connect() as conn:
            truck = conn.execute(text("SELECT depot, cost_per_km, compartments, products, version FROM trucks")).one()
            site = conn.execute(text("SELECT product, version FROM sites")).one()
        assert tuple(truck) == (None, 0.0, None, None, 1)
        assert tuple(site) == (None, 1)
        stamps = [plan_store.change_stamp(engine)]
        for statement in (
            "INSERT INTO depots (code, name, latitude, longitude, version, created_at, updated_at)"
            " VALUES ('D1', 'North depot', 52.1, 4.3, 1, :now, :now)",
            "INSERT INTO products (code, name, safe_fill, created_at) VALUES ('DSL', 'Diesel', 0.95, :now)",
            "UPDATE trucks SET depot = 'D1', cost_per_km = 1.5",
            "UPDATE sites SET product = 'DSL'",
            "UPDATE depots SET latitude = 52.2",
            "UPDATE products SET safe_fill = 0.9",
        ):
            with engine.begin() as conn:
                conn.execute(text(statement), {"now": now})
            stamps.append(plan_store.change_stamp(engine))
        assert len(set(stamps)) == len(stamps)  # every change moved it
    finally:
        engine.dispose()
    engine = db.make_engine(database_url)  # the app's engine: SQLite enforces foreign keys there
    try:
        for statement in (
            "UPDATE trucks SET depot = 'NOWHERE'",  # fk_trucks_depot_depots
            "UPDATE sites SET product = 'NOTHING'",  # fk_sites_product_products
            "UPDATE trucks SET cost_per_km = -1",  # ck_trucks_cost_per_km_nonnegative
            "UPDATE products SET safe_fill = 1.5",  # ck_products_safe_fill_fraction
            "UPDATE depots SET latitude = 91",  # ck_depots_latitude_range
        ):
            with pytest.raises(IntegrityError), engine.begin() as conn:
                conn.execute(text(statement))
    finally:
        engine.dispose()
