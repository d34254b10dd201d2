"""The single-statement reads of the hot path (service.persistence.db.read_one) on both databases."""

from __future__ import annotations

import pytest
from sqlalchemy import bindparam, create_engine, event, select, text
from sqlalchemy.exc import DBAPIError

from service.persistence import plans as plan_store
from service.persistence import repository as repo
from service.persistence.db import read_one
from service.persistence.models import Truck

BY_CODE = select(Truck.id, Truck.name).where(Truck.code == bindparam("code"))


@pytest.fixture
def truck_id(db_session) -> int:
    truck = repo.add_truck(db_session, {"code": "R-1", "name": "Reader", "dispatch_cost": 10.0, "capacity": 1000.0})
    db_session.commit()
    return truck.id


def test_read_one_gives_the_row_or_none(read_engine, truck_id):
    assert tuple(read_one(read_engine, BY_CODE, {"code": "R-1"})) == (truck_id, "Reader")
    assert read_one(read_engine, BY_CODE, {"code": "nope"}) is None


def test_reads_run_outside_any_transaction(read_engine, truck_id):
    # Autocommit: no transaction is open on the driver connection, during or after a read.
    def open_transaction() -> bool:
        raw = read_engine.raw_connection()
        try:
            driver = raw.driver_connection
            if read_engine.dialect.name == "sqlite":
                return driver.in_transaction
            return driver.info.transaction_status != driver.info.transaction_status.IDLE
        finally:
            raw.close()

    read_one(read_engine, BY_CODE, {"code": "R-1"})
    assert open_transaction() is False
    sent = []
    event.listen(read_engine, "before_cursor_execute", lambda c, cur, statement, *a: sent.append(statement))
    read_one(read_engine, BY_CODE, {"code": "R-1"})
    assert len(sent) == 1 and sent[0].lstrip().upper().startswith("SELECT")
    assert open_transaction() is False


def test_a_driver_error_comes_out_as_sqlalchemy_dbapierror(read_engine):
    with pytest.raises(DBAPIError) as caught:
        read_one(read_engine, select(text("no_such_column")).select_from(text("no_such_table")), {})
    assert caught.value.connection_invalidated is False


def test_change_stamp_is_stable_and_moves_with_any_truck_change(read_engine, db_session, truck_id):
    repo.add_truck(db_session, {"code": "R-2", "name": "Other", "dispatch_cost": 5.0, "capacity": 500.0})
    db_session.commit()
    marks = [plan_store.change_stamp(read_engine)]
    assert marks[0] is not None and plan_store.change_stamp(read_engine) == marks[0]  # stable
    assert repo.apply_changes(repo.truck_by_code(db_session, "R-2"), {"name": "Other, renamed"}, repo.TRUCK_FIELDS)
    db_session.commit()
    marks.append(plan_store.change_stamp(read_engine))  # coarse: any truck's change counts
    assert marks[-1] != marks[-2]


@pytest.mark.parametrize("database_url", ["postgresql"], indirect=True)  # a server-side disconnect
def test_a_connection_killed_by_the_server_is_retried_once(database_url, read_engine, truck_id):
    for read in (lambda: tuple(read_one(read_engine, BY_CODE, {"code": "R-1"})),):
        assert read() == (truck_id, "Reader")  # a pooled connection now exists
        with read_engine.connect() as connection:
            own = connection.exec_driver_sql("SELECT pg_backend_pid()").scalar()
        killer = create_engine(database_url)
        try:
            with killer.connect() as connection:
                killed = connection.execute(text("SELECT pg_terminate_backend(:pid)"), {"pid": own}).scalar()
        finally:
            killer.dispose()
        assert killed is True
        assert read() == (truck_id, "Reader")
