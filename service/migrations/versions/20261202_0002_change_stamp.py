"""change stamp: one row rewritten by triggers on every change a weekly-trips answer reads

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02 20:30:00

See ``service.persistence.models.ChangeStamp``. SQLite fires a plain AFTER trigger per row and
event (writers are serialised there); PostgreSQL a constraint trigger deferred to commit, which
writes the row once per transaction (a transaction-local setting remembers that it did).
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0002"
down_revision: str | Sequence[str] | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

#: The tables a weekly-trips answer reads (the truck, its sites, their readings, the active plan).
WATCHED = ("trucks", "sites", "readings", "plans")
EVENTS = ("insert", "update", "delete")

SQLITE_NEW_STAMP = "INSERT OR REPLACE INTO change_stamp (id, stamp) VALUES (1, lower(hex(randomblob(16))))"
POSTGRESQL_STAMP = "replace(gen_random_uuid()::text, '-', '')"  # 32 hex digits, as SQLite's

POSTGRESQL_FUNCTION = f"""
CREATE FUNCTION ullage_new_change_stamp() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    IF current_setting('ullage.change_stamped', true) IS DISTINCT FROM 'yes' THEN
        INSERT INTO change_stamp (id, stamp) VALUES (1, {POSTGRESQL_STAMP})
            ON CONFLICT (id) DO UPDATE SET stamp = excluded.stamp;
        PERFORM set_config('ullage.change_stamped', 'yes', true);
    END IF;
    RETURN NULL;
END
$$
"""


def _sqlite_triggers() -> list[tuple[str, str, str]]:
    """(name, table, event) of each SQLite trigger: SQLite has one event per trigger."""
    return [(f"trg_{table}_{event}_stamp", table, event) for table in WATCHED for event in EVENTS]


def upgrade() -> None:
    op.create_table(
        "change_stamp",
        sa.Column("id", sa.Integer(), autoincrement=False, nullable=False),
        sa.Column("stamp", sa.String(length=32), nullable=False),
        sa.CheckConstraint("id = 1", name=op.f("ck_change_stamp_single_row")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_change_stamp")),
    )
    if op.get_bind().dialect.name == "sqlite":
        op.execute(SQLITE_NEW_STAMP)
        for name, table, event in _sqlite_triggers():
            op.execute(f"CREATE TRIGGER {name} AFTER {event.upper()} ON {table} BEGIN {SQLITE_NEW_STAMP}; END")
        return
    op.execute(f"INSERT INTO change_stamp (id, stamp) VALUES (1, {POSTGRESQL_STAMP})")
    op.execute(POSTGRESQL_FUNCTION)
    for table in WATCHED:
        op.execute(
            f"CREATE CONSTRAINT TRIGGER trg_{table}_stamp AFTER INSERT OR UPDATE OR DELETE ON {table} "
            "DEFERRABLE INITIALLY DEFERRED FOR EACH ROW EXECUTE FUNCTION ullage_new_change_stamp()"
        )


def downgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        for name, _table, _event in _sqlite_triggers():
            op.execute(f"DROP TRIGGER {name}")
    else:
        for table in WATCHED:
            op.execute(f"DROP TRIGGER trg_{table}_stamp ON {table}")
        op.execute("DROP FUNCTION ullage_new_change_stamp()")
    op.drop_table("change_stamp")
