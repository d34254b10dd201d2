"""network plans: the fleet planning jobs; each truck's shift (hours, speed, stop and loading minutes)

Revision ID: 0009
Revises: 0008
Create Date: 2026-12-04 11:50:00

``network_plan_jobs`` holds one network plan per row: its request and input snapshot, its state
(``queued`` → ``running`` → ``done`` or ``failed``), progress, the worker that claimed it and when
that worker last reported (``heartbeat_at``: a running job whose worker stopped reporting is marked
failed, never left half-done), the result, and when it was activated. The table is not watched by
the change-stamp triggers: progress is written every second or two and is not an input of any plan.

Trucks get four optional shift settings (all NULL on existing trucks, i.e. no shift limit):
``shift_hours`` (0–24], ``average_speed_kmh`` > 0, ``stop_minutes`` ≥ 0 and ``load_minutes`` ≥ 0.
On SQLite they are added with ``ALTER TABLE … ADD COLUMN`` (CHECK inside the column's definition),
not by a batch rebuild that would drop the change-stamp triggers (see migration 0005).
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0009"
down_revision: str | Sequence[str] | None = "0008"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

#: (column, CHECK) of the trucks' shift settings; every one may be NULL (not set).
SHIFT_COLUMNS = (
    ("shift_hours", "shift_hours IS NULL OR (shift_hours > 0 AND shift_hours <= 24)"),
    ("average_speed_kmh", "average_speed_kmh IS NULL OR average_speed_kmh > 0"),
    ("stop_minutes", "stop_minutes IS NULL OR stop_minutes >= 0"),
    ("load_minutes", "load_minutes IS NULL OR load_minutes >= 0"),
)
JOB_STATUSES = "status IN ('queued', 'running', 'done', 'failed')"


def _check_name(column: str) -> str:
    return f"ck_trucks_{column}_range"


def upgrade() -> None:
    op.create_table(
        "network_plan_jobs",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("status", sa.String(length=12), nullable=False),
        sa.Column("progress", sa.Float(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("created_by", sa.String(length=80), nullable=False),
        sa.Column("started_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("heartbeat_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("finished_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("worker", sa.String(length=120), nullable=True),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("start_date", sa.Date(), nullable=False),
        sa.Column("inputs", sa.JSON(), nullable=False),
        sa.Column("inputs_digest", sa.String(length=64), nullable=False),
        sa.Column("result", sa.JSON(), nullable=True),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("activated_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("activated_by", sa.String(length=80), nullable=True),
        sa.CheckConstraint(JOB_STATUSES, name=op.f("ck_network_plan_jobs_status_known")),
        sa.CheckConstraint("progress >= 0 AND progress <= 1", name=op.f("ck_network_plan_jobs_progress_fraction")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_network_plan_jobs")),
    )
    op.create_index(op.f("ix_network_plan_jobs_status"), "network_plan_jobs", ["status"], unique=False)
    if op.get_bind().dialect.name == "sqlite":
        for column, check in SHIFT_COLUMNS:
            op.execute(f"ALTER TABLE trucks ADD COLUMN {column} FLOAT CONSTRAINT {_check_name(column)} CHECK ({check})")
        return
    for column, check in SHIFT_COLUMNS:
        op.add_column("trucks", sa.Column(column, sa.Float(), nullable=True))
        op.create_check_constraint(op.f(_check_name(column)), "trucks", check)


def downgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        for column, _ in reversed(SHIFT_COLUMNS):
            op.execute(f"ALTER TABLE trucks DROP COLUMN {column}")
    else:
        for column, _ in reversed(SHIFT_COLUMNS):
            op.drop_constraint(op.f(_check_name(column)), "trucks", type_="check")
            op.drop_column("trucks", column)
    op.drop_index(op.f("ix_network_plan_jobs_status"), table_name="network_plan_jobs")
    op.drop_table("network_plan_jobs")
