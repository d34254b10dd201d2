"""truck calendar: working days, trips per day, closed dates and holiday region of each truck

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-03 20:10:00

Existing trucks get the defaults: Monday to Friday, one trip a day, no closed dates, no holiday
region (see ``service.working_calendar``).

On SQLite the columns are added with ``ALTER TABLE … ADD COLUMN`` (the CHECK inside the column's
definition), not by a batch rebuild of ``trucks``: a rebuild drops the table's change-stamp
triggers of migration 0002 (cached weekly trips would miss truck changes), and dropping the old
table is refused while sites reference it, because the app's connections enforce foreign keys
and the pragma cannot be switched off inside the migration's transaction.
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0005"
down_revision: str | Sequence[str] | None = "0004"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

CHECK_NAME = "ck_trucks_trips_per_day_range"
CHECK = "trips_per_day >= 1 AND trips_per_day <= 24"
COLUMNS = ("working_days", "trips_per_day", "closed_dates", "holiday_region")


def upgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        op.execute("ALTER TABLE trucks ADD COLUMN working_days JSON DEFAULT '[1, 2, 3, 4, 5]' NOT NULL")
        op.execute(
            f"ALTER TABLE trucks ADD COLUMN trips_per_day INTEGER DEFAULT 1 NOT NULL CONSTRAINT {CHECK_NAME} CHECK ({CHECK})"
        )
        op.execute("ALTER TABLE trucks ADD COLUMN closed_dates JSON DEFAULT '[]' NOT NULL")
        op.execute("ALTER TABLE trucks ADD COLUMN holiday_region VARCHAR(40)")
        return
    op.add_column(
        "trucks", sa.Column("working_days", sa.JSON(), server_default=sa.text("'[1, 2, 3, 4, 5]'"), nullable=False)
    )
    op.add_column("trucks", sa.Column("trips_per_day", sa.Integer(), server_default=sa.text("1"), nullable=False))
    op.add_column("trucks", sa.Column("closed_dates", sa.JSON(), server_default=sa.text("'[]'"), nullable=False))
    op.add_column("trucks", sa.Column("holiday_region", sa.String(length=40), nullable=True))
    op.create_check_constraint(op.f(CHECK_NAME), "trucks", CHECK)


def downgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        for column in reversed(COLUMNS):  # SQLite ≥ 3.35 drops a column whose CHECK is its own
            op.execute(f"ALTER TABLE trucks DROP COLUMN {column}")
        return
    op.drop_constraint(op.f(CHECK_NAME), "trucks", type_="check")
    for column in reversed(COLUMNS):
        op.drop_column("trucks", column)
