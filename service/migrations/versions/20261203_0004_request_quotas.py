"""request quotas: per-token counters of the rate limits on expensive routes

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-03 17:06:31

See ``service.persistence.models.RequestQuota`` and ``service.bounded``. Not watched by the
change-stamp triggers: no weekly-trips answer reads it.
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0004"
down_revision: str | Sequence[str] | None = "0003"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "request_quotas",
        sa.Column("token_id", sa.Integer(), nullable=False),
        sa.Column("bucket", sa.String(length=16), nullable=False),
        sa.Column("window_start", sa.BigInteger(), nullable=False),
        sa.Column("hits", sa.Integer(), nullable=False),
        sa.CheckConstraint("hits >= 0", name=op.f("ck_request_quotas_hits_nonnegative")),
        sa.ForeignKeyConstraint(["token_id"], ["tokens.id"], name=op.f("fk_request_quotas_token_id_tokens")),
        sa.PrimaryKeyConstraint("token_id", "bucket", name=op.f("pk_request_quotas")),
    )


def downgrade() -> None:
    op.drop_table("request_quotas")
