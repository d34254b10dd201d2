"""weather: daily mean temperatures per region; each site's weather region and base temperature

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-04 06:00:00

``weather_days`` holds one mean temperature (°C) per region and calendar day, ``observed`` or
``forecast`` (unique per region and day: re-posting a day replaces it). Projections of a weather
site read it, so it is watched by the change-stamp triggers of migration 0002 (same trigger and
function). On SQLite the site columns are added with ``ALTER TABLE … ADD COLUMN`` (the CHECK in
the column's definition), not by a batch rebuild of ``sites``: a rebuild would drop the table's
change-stamp triggers, and dropping the old table is refused while readings and plan_sites
reference it (see migration 0005).
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0007"
down_revision: str | Sequence[str] | None = "0006"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

CHECK_NAME = "ck_sites_base_temperature_range"
CHECK = "base_temperature >= -50 AND base_temperature <= 50"
EVENTS = ("insert", "update", "delete")
SQLITE_NEW_STAMP = "INSERT OR REPLACE INTO change_stamp (id, stamp) VALUES (1, lower(hex(randomblob(16))))"


def upgrade() -> None:
    sqlite = op.get_bind().dialect.name == "sqlite"
    if sqlite:
        op.execute("ALTER TABLE sites ADD COLUMN weather_region VARCHAR(40)")
        op.execute(
            f"ALTER TABLE sites ADD COLUMN base_temperature FLOAT DEFAULT 15.5 NOT NULL CONSTRAINT {CHECK_NAME} CHECK ({CHECK})"
        )
    else:
        op.add_column("sites", sa.Column("weather_region", sa.String(length=40), nullable=True))
        op.add_column(
            "sites", sa.Column("base_temperature", sa.Float(), server_default=sa.text("15.5"), nullable=False)
        )
        op.create_check_constraint(op.f(CHECK_NAME), "sites", CHECK)
    op.create_table(
        "weather_days",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("region", sa.String(length=40), nullable=False),
        sa.Column("day", sa.Date(), nullable=False),
        sa.Column("mean_temperature", sa.Float(), nullable=False),
        sa.Column("source", sa.String(length=8), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("created_by", sa.String(length=80), nullable=False),
        sa.CheckConstraint(
            "mean_temperature >= -90 AND mean_temperature <= 60", name=op.f("ck_weather_days_mean_temperature_range")
        ),
        sa.CheckConstraint("source IN ('observed', 'forecast')", name=op.f("ck_weather_days_source_known")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_weather_days")),
        sa.UniqueConstraint("region", "day", name="uq_weather_days_region_day"),
    )
    if sqlite:
        for event in EVENTS:
            op.execute(
                f"CREATE TRIGGER trg_weather_days_{event}_stamp AFTER {event.upper()} ON weather_days "
                f"BEGIN {SQLITE_NEW_STAMP}; END"
            )
    else:
        op.execute(
            "CREATE CONSTRAINT TRIGGER trg_weather_days_stamp AFTER INSERT OR UPDATE OR DELETE ON weather_days "
            "DEFERRABLE INITIALLY DEFERRED FOR EACH ROW EXECUTE FUNCTION ullage_new_change_stamp()"
        )


def downgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        for event in EVENTS:
            op.execute(f"DROP TRIGGER trg_weather_days_{event}_stamp")
        op.drop_table("weather_days")
        op.execute("ALTER TABLE sites DROP COLUMN base_temperature")  # SQLite ≥ 3.35: its own CHECK goes too
        op.execute("ALTER TABLE sites DROP COLUMN weather_region")
        return
    op.execute("DROP TRIGGER trg_weather_days_stamp ON weather_days")
    op.drop_table("weather_days")
    op.drop_constraint(op.f(CHECK_NAME), "sites", type_="check")
    op.drop_column("sites", "base_temperature")
    op.drop_column("sites", "weather_region")
