"""initial schema

Revision ID: 0001
Revises: (none)
Create Date: 2026-12-01 18:40:10.229603
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0001"
down_revision: str | Sequence[str] | None = None
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "tokens",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=80), nullable=False),
        sa.Column("role", sa.String(length=16), nullable=False),
        sa.Column("secret_hash", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("last_used_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
        sa.CheckConstraint("role IN ('admin', 'dispatcher', 'viewer')", name=op.f("ck_tokens_role_known")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_tokens")),
        sa.UniqueConstraint("name", name=op.f("uq_tokens_name")),
        sa.UniqueConstraint("secret_hash", name=op.f("uq_tokens_secret_hash")),
    )
    op.create_table(
        "trucks",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("code", sa.String(length=40), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("dispatch_cost", sa.Float(), nullable=False),
        sa.Column("capacity", sa.Float(), nullable=False),
        sa.Column("max_stops", sa.Integer(), nullable=True),
        sa.Column("active", sa.Boolean(), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint("capacity > 0", name=op.f("ck_trucks_capacity_positive")),
        sa.CheckConstraint("dispatch_cost >= 0", name=op.f("ck_trucks_dispatch_cost_nonnegative")),
        sa.CheckConstraint("max_stops IS NULL OR max_stops >= 1", name=op.f("ck_trucks_max_stops_positive")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_trucks")),
        sa.UniqueConstraint("code", name=op.f("uq_trucks_code")),
    )
    op.create_table(
        "idempotency_keys",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("token_id", sa.Integer(), nullable=False),
        sa.Column("idempotency_key", sa.String(length=255), nullable=False),
        sa.Column("method", sa.String(length=8), nullable=False),
        sa.Column("path", sa.String(length=400), nullable=False),
        sa.Column("body_sha256", sa.String(length=64), nullable=False),
        sa.Column("state", sa.String(length=12), nullable=False),
        sa.Column("claim", sa.String(length=32), nullable=False),
        sa.Column("claimed_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("response_status", sa.Integer(), nullable=True),
        sa.Column("response_body", sa.Text(), nullable=True),
        sa.Column("response_location", sa.String(length=400), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint("state IN ('in_progress', 'done')", name=op.f("ck_idempotency_keys_state_known")),
        sa.ForeignKeyConstraint(["token_id"], ["tokens.id"], name=op.f("fk_idempotency_keys_token_id_tokens")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_idempotency_keys")),
        sa.UniqueConstraint("token_id", "idempotency_key", name="uq_idempotency_keys_token_key"),
    )
    with op.batch_alter_table("idempotency_keys", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_idempotency_keys_created_at"), ["created_at"], unique=False)

    op.create_table(
        "plans",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("truck_id", sa.Integer(), nullable=False),
        sa.Column("status", sa.String(length=12), nullable=False),
        sa.Column("method", sa.String(length=16), nullable=False),
        sa.Column("start_date", sa.Date(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("created_by", sa.String(length=80), nullable=False),
        sa.Column("inputs", sa.JSON(), nullable=False),
        sa.Column("inputs_digest", sa.String(length=64), nullable=False),
        sa.Column("result", sa.JSON(), nullable=False),
        sa.CheckConstraint("status IN ('proposed', 'active', 'superseded')", name=op.f("ck_plans_status_known")),
        sa.ForeignKeyConstraint(["truck_id"], ["trucks.id"], name=op.f("fk_plans_truck_id_trucks")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_plans")),
    )
    with op.batch_alter_table("plans", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_plans_truck_id"), ["truck_id"], unique=False)
        batch_op.create_index(
            "uq_plans_one_active_per_truck",
            ["truck_id"],
            unique=True,
            sqlite_where=sa.text("status = 'active'"),
            postgresql_where=sa.text("status = 'active'"),
        )

    op.create_table(
        "sites",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("code", sa.String(length=40), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("truck_id", sa.Integer(), nullable=False),
        sa.Column("demand_per_day", sa.Float(), nullable=False),
        sa.Column("holding_cost", sa.Float(), nullable=False),
        sa.Column("stop_cost", sa.Float(), nullable=False),
        sa.Column("tank_capacity", sa.Float(), nullable=False),
        sa.Column("safe_fill", sa.Float(), nullable=False),
        sa.Column("safety_stock", sa.Float(), nullable=False),
        sa.Column("active", sa.Boolean(), nullable=False),
        sa.Column("latitude", sa.Float(), nullable=True),
        sa.Column("longitude", sa.Float(), nullable=True),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint("demand_per_day > 0", name=op.f("ck_sites_demand_positive")),
        sa.CheckConstraint("holding_cost >= 0", name=op.f("ck_sites_holding_cost_nonnegative")),
        sa.CheckConstraint("safe_fill > 0 AND safe_fill <= 1", name=op.f("ck_sites_safe_fill_fraction")),
        sa.CheckConstraint(
            "safety_stock >= 0 AND safety_stock < safe_fill * tank_capacity",
            name=op.f("ck_sites_safety_stock_below_safe_fill"),
        ),
        sa.CheckConstraint("stop_cost >= 0", name=op.f("ck_sites_stop_cost_nonnegative")),
        sa.CheckConstraint("tank_capacity > 0", name=op.f("ck_sites_tank_capacity_positive")),
        sa.ForeignKeyConstraint(["truck_id"], ["trucks.id"], name=op.f("fk_sites_truck_id_trucks")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_sites")),
        sa.UniqueConstraint("code", name=op.f("uq_sites_code")),
    )
    with op.batch_alter_table("sites", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_sites_truck_id"), ["truck_id"], unique=False)

    op.create_table(
        "plan_sites",
        sa.Column("plan_id", sa.Integer(), nullable=False),
        sa.Column("site_id", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["plan_id"], ["plans.id"], name=op.f("fk_plan_sites_plan_id_plans")),
        sa.ForeignKeyConstraint(["site_id"], ["sites.id"], name=op.f("fk_plan_sites_site_id_sites")),
        sa.PrimaryKeyConstraint("plan_id", "site_id", name=op.f("pk_plan_sites")),
    )
    with op.batch_alter_table("plan_sites", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_plan_sites_site_id"), ["site_id"], unique=False)

    op.create_table(
        "readings",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("site_id", sa.Integer(), nullable=False),
        sa.Column("level", sa.Float(), nullable=False),
        sa.Column("measured_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("created_by", sa.String(length=80), nullable=False),
        sa.CheckConstraint("level >= 0", name=op.f("ck_readings_level_nonnegative")),
        sa.ForeignKeyConstraint(["site_id"], ["sites.id"], name=op.f("fk_readings_site_id_sites")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_readings")),
    )
    with op.batch_alter_table("readings", schema=None) as batch_op:
        batch_op.create_index("ix_readings_site_measured", ["site_id", "measured_at"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("readings", schema=None) as batch_op:
        batch_op.drop_index("ix_readings_site_measured")

    op.drop_table("readings")
    with op.batch_alter_table("plan_sites", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_plan_sites_site_id"))

    op.drop_table("plan_sites")
    with op.batch_alter_table("sites", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_sites_truck_id"))

    op.drop_table("sites")
    with op.batch_alter_table("plans", schema=None) as batch_op:
        batch_op.drop_index(
            "uq_plans_one_active_per_truck",
            sqlite_where=sa.text("status = 'active'"),
            postgresql_where=sa.text("status = 'active'"),
        )
        batch_op.drop_index(batch_op.f("ix_plans_truck_id"))

    op.drop_table("plans")
    with op.batch_alter_table("idempotency_keys", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_idempotency_keys_created_at"))

    op.drop_table("idempotency_keys")
    op.drop_table("trucks")
    op.drop_table("tokens")
