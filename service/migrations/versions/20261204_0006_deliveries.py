"""deliveries: what was delivered; trucks.shift_start; sites.service_level and lead_time_days

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-04 05:42:25

The ``deliveries`` table is read by the weekly trips answer, so it gets the change-stamp triggers
of migration 0002. Existing trucks start their shift at 06:00; existing sites have no service
level (no suggested safety stock) and a lead time of one day.

On SQLite the columns are added with ``ALTER TABLE … ADD COLUMN`` (CHECK inside the column's
definition), not by a batch rebuild, which would drop the watched tables' change-stamp triggers
(see migration 0005).
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0006"
down_revision: str | Sequence[str] | None = "0005"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

SQLITE_NEW_STAMP = "INSERT OR REPLACE INTO change_stamp (id, stamp) VALUES (1, lower(hex(randomblob(16))))"
EVENTS = ("insert", "update", "delete")
SERVICE_LEVEL_CHECK = (
    "ck_sites_service_level_fraction",
    "service_level IS NULL OR (service_level > 0 AND service_level < 1)",
)
LEAD_TIME_CHECK = ("ck_sites_lead_time_nonnegative", "lead_time_days >= 0")


def upgrade() -> None:
    op.create_table(
        "deliveries",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("site_id", sa.Integer(), nullable=False),
        sa.Column("truck_id", sa.Integer(), nullable=True),
        sa.Column("quantity", sa.Float(), nullable=False),
        sa.Column("delivered_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("level_before", sa.Float(), nullable=True),
        sa.Column("level_after", sa.Float(), nullable=True),
        sa.Column("note", sa.String(length=500), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("created_by", sa.String(length=80), nullable=False),
        sa.CheckConstraint(
            "level_after IS NULL OR level_after >= 0", name=op.f("ck_deliveries_level_after_nonnegative")
        ),
        sa.CheckConstraint(
            "level_before IS NULL OR level_before >= 0", name=op.f("ck_deliveries_level_before_nonnegative")
        ),
        sa.CheckConstraint("quantity > 0", name=op.f("ck_deliveries_quantity_positive")),
        sa.ForeignKeyConstraint(["site_id"], ["sites.id"], name=op.f("fk_deliveries_site_id_sites")),
        sa.ForeignKeyConstraint(["truck_id"], ["trucks.id"], name=op.f("fk_deliveries_truck_id_trucks")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_deliveries")),
    )
    op.create_index("ix_deliveries_site_delivered", "deliveries", ["site_id", "delivered_at"], unique=False)
    op.create_index(op.f("ix_deliveries_truck_id"), "deliveries", ["truck_id"], unique=False)
    if op.get_bind().dialect.name == "sqlite":
        name, check = SERVICE_LEVEL_CHECK
        op.execute(f"ALTER TABLE sites ADD COLUMN service_level FLOAT CONSTRAINT {name} CHECK ({check})")
        name, check = LEAD_TIME_CHECK
        op.execute(
            f"ALTER TABLE sites ADD COLUMN lead_time_days FLOAT DEFAULT 1.0 NOT NULL CONSTRAINT {name} CHECK ({check})"
        )
        op.execute("ALTER TABLE trucks ADD COLUMN shift_start TIME DEFAULT '06:00:00' NOT NULL")
        for event in EVENTS:
            op.execute(
                f"CREATE TRIGGER trg_deliveries_{event}_stamp AFTER {event.upper()} ON deliveries "
                f"BEGIN {SQLITE_NEW_STAMP}; END"
            )
        return
    op.add_column("sites", sa.Column("service_level", sa.Float(), nullable=True))
    op.add_column("sites", sa.Column("lead_time_days", sa.Float(), server_default=sa.text("1.0"), nullable=False))
    for name, check in (SERVICE_LEVEL_CHECK, LEAD_TIME_CHECK):
        op.create_check_constraint(op.f(name), "sites", check)
    op.add_column("trucks", sa.Column("shift_start", sa.Time(), server_default=sa.text("'06:00:00'"), nullable=False))
    op.execute(
        "CREATE CONSTRAINT TRIGGER trg_deliveries_stamp AFTER INSERT OR UPDATE OR DELETE ON deliveries "
        "DEFERRABLE INITIALLY DEFERRED FOR EACH ROW EXECUTE FUNCTION ullage_new_change_stamp()"
    )


def downgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        for event in EVENTS:
            op.execute(f"DROP TRIGGER trg_deliveries_{event}_stamp")
        for table, column in (("trucks", "shift_start"), ("sites", "lead_time_days"), ("sites", "service_level")):
            op.execute(f"ALTER TABLE {table} DROP COLUMN {column}")
    else:
        op.execute("DROP TRIGGER trg_deliveries_stamp ON deliveries")
        op.drop_column("trucks", "shift_start")
        for name, _check in (LEAD_TIME_CHECK, SERVICE_LEVEL_CHECK):
            op.drop_constraint(op.f(name), "sites", type_="check")
        op.drop_column("sites", "lead_time_days")
        op.drop_column("sites", "service_level")
    op.drop_index(op.f("ix_deliveries_truck_id"), table_name="deliveries")
    op.drop_index("ix_deliveries_site_delivered", table_name="deliveries")
    op.drop_table("deliveries")
