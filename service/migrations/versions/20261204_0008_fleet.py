"""fleet: depots and products; each truck's depot, cost per km, compartments and products; each site's product

Revision ID: 0008
Revises: 0007
Create Date: 2026-12-04 07:20:00

The first slice of the fleet level (issue 16). ``depots`` (code, name, latitude, longitude) and
``products`` (code, name, default safe fill) are new tables, both watched by the change-stamp
triggers of migration 0002 (same trigger and function). Existing trucks get no depot, cost per km 0,
no compartments (one undivided tank) and no product list (any product); existing sites no product.

On SQLite the columns are added with ``ALTER TABLE … ADD COLUMN`` (CHECK and REFERENCES inside the
column's definition), not by a batch rebuild of ``trucks`` or ``sites``: a rebuild would drop their
change-stamp triggers, and dropping the old table is refused while other tables reference it (see
migration 0005).
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0008"
down_revision: str | Sequence[str] | None = "0007"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

CHECK_NAME = "ck_trucks_cost_per_km_nonnegative"
CHECK = "cost_per_km >= 0"
DEPOT_FK = "fk_trucks_depot_depots"
PRODUCT_FK = "fk_sites_product_products"
NEW_TABLES = ("depots", "products")
EVENTS = ("insert", "update", "delete")
SQLITE_NEW_STAMP = "INSERT OR REPLACE INTO change_stamp (id, stamp) VALUES (1, lower(hex(randomblob(16))))"


def _create_tables() -> None:
    op.create_table(
        "depots",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("code", sa.String(length=40), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("latitude", sa.Float(), nullable=False),
        sa.Column("longitude", sa.Float(), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint("latitude >= -90 AND latitude <= 90", name=op.f("ck_depots_latitude_range")),
        sa.CheckConstraint("longitude >= -180 AND longitude <= 180", name=op.f("ck_depots_longitude_range")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_depots")),
        sa.UniqueConstraint("code", name=op.f("uq_depots_code")),
    )
    op.create_table(
        "products",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("code", sa.String(length=40), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("safe_fill", sa.Float(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint("safe_fill > 0 AND safe_fill <= 1", name=op.f("ck_products_safe_fill_fraction")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_products")),
        sa.UniqueConstraint("code", name=op.f("uq_products_code")),
    )


def upgrade() -> None:
    _create_tables()
    if op.get_bind().dialect.name == "sqlite":
        op.execute(f"ALTER TABLE trucks ADD COLUMN depot VARCHAR(40) CONSTRAINT {DEPOT_FK} REFERENCES depots (code)")
        op.execute(
            f"ALTER TABLE trucks ADD COLUMN cost_per_km FLOAT DEFAULT 0 NOT NULL CONSTRAINT {CHECK_NAME} CHECK ({CHECK})"
        )
        op.execute("ALTER TABLE trucks ADD COLUMN compartments JSON")
        op.execute("ALTER TABLE trucks ADD COLUMN products JSON")
        op.execute(
            f"ALTER TABLE sites ADD COLUMN product VARCHAR(40) CONSTRAINT {PRODUCT_FK} REFERENCES products (code)"
        )
        for table in NEW_TABLES:
            for event in EVENTS:
                op.execute(
                    f"CREATE TRIGGER trg_{table}_{event}_stamp AFTER {event.upper()} ON {table} "
                    f"BEGIN {SQLITE_NEW_STAMP}; END"
                )
        return
    op.add_column("trucks", sa.Column("depot", sa.String(length=40), nullable=True))
    op.add_column("trucks", sa.Column("cost_per_km", sa.Float(), server_default=sa.text("0"), nullable=False))
    op.add_column("trucks", sa.Column("compartments", sa.JSON(), nullable=True))
    op.add_column("trucks", sa.Column("products", sa.JSON(), nullable=True))
    op.create_check_constraint(op.f(CHECK_NAME), "trucks", CHECK)
    op.create_foreign_key(op.f(DEPOT_FK), "trucks", "depots", ["depot"], ["code"])
    op.add_column("sites", sa.Column("product", sa.String(length=40), nullable=True))
    op.create_foreign_key(op.f(PRODUCT_FK), "sites", "products", ["product"], ["code"])
    for table in NEW_TABLES:
        op.execute(
            f"CREATE CONSTRAINT TRIGGER trg_{table}_stamp AFTER INSERT OR UPDATE OR DELETE ON {table} "
            "DEFERRABLE INITIALLY DEFERRED FOR EACH ROW EXECUTE FUNCTION ullage_new_change_stamp()"
        )


def downgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        for table in NEW_TABLES:
            for event in EVENTS:
                op.execute(f"DROP TRIGGER trg_{table}_{event}_stamp")
        op.execute("ALTER TABLE sites DROP COLUMN product")  # SQLite ≥ 3.35: its own REFERENCES goes too
        for column in ("products", "compartments", "cost_per_km", "depot"):
            op.execute(f"ALTER TABLE trucks DROP COLUMN {column}")
    else:
        for table in NEW_TABLES:
            op.execute(f"DROP TRIGGER trg_{table}_stamp ON {table}")
        op.drop_constraint(op.f(PRODUCT_FK), "sites", type_="foreignkey")
        op.drop_column("sites", "product")
        op.drop_constraint(op.f(DEPOT_FK), "trucks", type_="foreignkey")
        op.drop_constraint(op.f(CHECK_NAME), "trucks", type_="check")
        for column in ("products", "compartments", "cost_per_km", "depot"):
            op.drop_column("trucks", column)
    op.drop_table("products")
    op.drop_table("depots")
