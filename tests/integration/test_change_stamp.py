"""The change stamp (migration 0002) behind the trips cache, on both databases.

What is checked: every committed insert, update or delete of a truck, site, reading, plan or weather day gives a
new stamp, whatever code path (or plain SQL) made it; other tables, reads and rolled-back work leave
it alone; on PostgreSQL the stamp is written at commit, once per transaction, so two writers that
lock sites in opposite orders cannot deadlock on it.
"""

from __future__ import annotations

import datetime as dt
import threading

import pytest
from sqlalchemy import create_engine, text
from sqlalchemy.orm import Session

from service.persistence import plans as plan_store
from service.persistence import repository as repo
from service.persistence import weather as weather_store
from service.persistence.models import Site, Truck

UTC = dt.UTC
SITE = {
    "name": "Stamp site",
    "demand_per_day": 100.0,
    "holding_cost": 0.01,
    "stop_cost": 5.0,
    "tank_capacity": 5000.0,
    "safe_fill": 0.9,
    "safety_stock": 200.0,
}


@pytest.fixture
def network(db_session: Session) -> dict[str, int]:
    truck = repo.add_truck(db_session, {"code": "ST-1", "name": "Stamper", "dispatch_cost": 50.0, "capacity": 9000.0})
    sites = [repo.add_site(db_session, {**SITE, "code": f"ST-S{i}"}, truck) for i in (1, 2)]
    db_session.commit()
    return {"truck": truck.id, "site1": sites[0].id, "site2": sites[1].id}


def stamp(read_engine) -> str | None:
    return plan_store.change_stamp(read_engine)


def test_a_stamp_is_a_32_digit_hex_and_steady_while_nothing_changes(read_engine, network, db_session):
    first = stamp(read_engine)
    assert first is not None and len(first) == 32 and set(first) <= set("0123456789abcdef")
    db_session.execute(text("SELECT count(*) FROM sites")).scalar_one()  # a read
    repo.add_token(db_session, "stamp-test", "viewer", "0" * 64)  # a table trips do not read
    db_session.commit()
    assert stamp(read_engine) == first


def test_every_committed_change_of_a_watched_table_gives_a_new_stamp(read_engine, network, db_session):
    site = db_session.get(Site, network["site1"])
    now = dt.datetime(2026, 12, 2, 8, tzinfo=UTC)
    changes = {
        "truck update": lambda: db_session.execute(text("UPDATE trucks SET name = 'Renamed' WHERE code = 'ST-1'")),
        "truck insert": lambda: repo.add_truck(
            db_session, {"code": "ST-2", "name": "Second", "dispatch_cost": 1.0, "capacity": 10.0}
        ),
        "truck delete": lambda: db_session.execute(text("DELETE FROM trucks WHERE code = 'ST-2'")),
        "site insert": lambda: repo.add_site(
            db_session, {**SITE, "code": "ST-S3"}, db_session.get(Truck, network["truck"])
        ),
        "site update": lambda: db_session.execute(text("UPDATE sites SET demand_per_day = 120 WHERE code = 'ST-S1'")),
        "site update to the same value": lambda: db_session.execute(
            text("UPDATE sites SET demand_per_day = 120 WHERE code = 'ST-S1'")
        ),
        "site delete": lambda: db_session.execute(text("DELETE FROM sites WHERE code = 'ST-S3'")),
        "reading insert": lambda: plan_store.add_reading(db_session, site, 1000.0, now, "test"),
        "reading update": lambda: db_session.execute(text("UPDATE readings SET level = 900")),
        "reading delete": lambda: db_session.execute(text("DELETE FROM readings")),
        "plan insert": lambda: plan_store.add_plan(
            db_session,
            db_session.get(Truck, network["truck"]),
            [site],
            method="power_of_two",
            start_date=now.date(),
            created_by="test",
            inputs={"truck": {}, "sites": []},
            result={},
        ),
        "weather insert": lambda: weather_store.post_days(
            db_session, "ST-R", [(dt.date(2026, 12, 1), 3.0, "observed")], "test"
        ),
        "weather replace": lambda: weather_store.post_days(
            db_session, "ST-R", [(dt.date(2026, 12, 1), 4.0, "observed")], "test"
        ),
        "weather delete": lambda: db_session.execute(text("DELETE FROM weather_days")),
        "plan update": lambda: db_session.execute(text("UPDATE plans SET status = 'active'")),
        "plan delete": lambda: (
            db_session.execute(text("DELETE FROM plan_sites")),
            db_session.execute(text("DELETE FROM plans")),
        ),
    }
    seen = [stamp(read_engine)]
    for name, change in changes.items():
        change()
        db_session.flush()
        assert stamp(read_engine) == seen[-1], f"{name}: visible before commit"
        db_session.commit()
        seen.append(stamp(read_engine))
        assert seen[-1] != seen[-2], f"{name}: the stamp did not move"
    assert len(set(seen)) == len(seen)  # never an earlier value again


def test_rolled_back_changes_leave_the_stamp(read_engine, network, db_session):
    before = stamp(read_engine)
    db_session.execute(text("UPDATE sites SET demand_per_day = 150"))
    db_session.flush()
    db_session.rollback()
    assert stamp(read_engine) == before


def test_a_lost_stamp_row_comes_back_with_the_next_change(read_engine, network, db_session):
    db_session.execute(text("DELETE FROM change_stamp"))
    db_session.commit()
    assert stamp(read_engine) is None
    db_session.execute(text("UPDATE trucks SET name = 'Again' WHERE code = 'ST-1'"))
    db_session.commit()
    assert stamp(read_engine) is not None


POSTGRESQL_ONLY = pytest.mark.parametrize("database_url", ["postgresql"], indirect=True)  # SQLite serialises writers


@POSTGRESQL_ONLY
def test_postgresql_writes_the_stamp_once_per_transaction_and_only_at_commit(database_url, network):
    engine = create_engine(database_url)
    try:
        with engine.connect() as writer, engine.connect() as other:
            writer.execute(text("UPDATE sites SET demand_per_day = demand_per_day + 1"))  # two rows
            writer.execute(text("UPDATE trucks SET name = 'Twice'"))
            # Not locked yet: the triggers wait for commit.
            other.execute(text("SET lock_timeout = '200ms'"))
            other.execute(text("SELECT stamp FROM change_stamp FOR UPDATE NOWAIT")).one()
            other.rollback()
            writer.execute(text("SET CONSTRAINTS ALL IMMEDIATE"))  # fire the pending triggers now
            written = writer.execute(
                text("SELECT n_tup_ins + n_tup_upd FROM pg_stat_xact_user_tables WHERE relname = 'change_stamp'")
            ).scalar_one()
            assert written == 1  # three row changes, one write of the stamp
            writer.rollback()
    finally:
        engine.dispose()


@POSTGRESQL_ONLY
def test_postgresql_writers_locking_sites_in_opposite_orders_do_not_deadlock(database_url, network):
    # With the stamp written at each statement, A would hold the stamp's lock after its first
    # update and B would wait for it while holding site 2, which A then wants: a deadlock.
    engine = create_engine(database_url)
    errors: list[BaseException] = []
    try:
        with engine.connect() as a, engine.connect() as b:
            for conn in (a, b):
                conn.execute(text("SET lock_timeout = '5s'"))
            a.execute(text("UPDATE sites SET demand_per_day = 101 WHERE id = :id"), {"id": network["site1"]})
            b.execute(text("UPDATE sites SET demand_per_day = 102 WHERE id = :id"), {"id": network["site2"]})

            def a_takes_site2() -> None:
                try:
                    a.execute(text("UPDATE sites SET demand_per_day = 103 WHERE id = :id"), {"id": network["site2"]})
                    a.commit()
                except BaseException as exc:  # noqa: BLE001 - reported below
                    errors.append(exc)

            waiter = threading.Thread(target=a_takes_site2)
            waiter.start()
            waiter.join(0.3)  # A now waits for B's row lock on site 2
            b.commit()  # B writes the stamp at commit: free, since A does not hold it yet
            waiter.join(10)
            assert not waiter.is_alive()
        assert errors == []
        with engine.connect() as conn:
            assert conn.execute(
                text("SELECT demand_per_day FROM sites WHERE id = :id"), {"id": network["site2"]}
            ).scalar_one() == pytest.approx(103)
    finally:
        engine.dispose()
