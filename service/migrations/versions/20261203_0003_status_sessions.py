"""status sessions: the status page's sign-ins, kept on the server so that sign-out ends them

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-03 16:59:52

See ``service.persistence.models.StatusSession``. Not read by the weekly trips answer, so not
watched by the change-stamp triggers of 0002. Sessions signed in before this revision (cookies
that only held the token's id) are not valid afterwards: people sign in once more.
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0003"
down_revision: str | Sequence[str] | None = "0002"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "status_sessions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("secret_hash", sa.String(length=64), nullable=False),
        sa.Column("token_id", sa.Integer(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["token_id"], ["tokens.id"], name=op.f("fk_status_sessions_token_id_tokens")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_status_sessions")),
        sa.UniqueConstraint("secret_hash", name=op.f("uq_status_sessions_secret_hash")),
    )
    with op.batch_alter_table("status_sessions", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_status_sessions_created_at"), ["created_at"], unique=False)
        batch_op.create_index(batch_op.f("ix_status_sessions_token_id"), ["token_id"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("status_sessions", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_status_sessions_token_id"))
        batch_op.drop_index(batch_op.f("ix_status_sessions_created_at"))
    op.drop_table("status_sessions")
