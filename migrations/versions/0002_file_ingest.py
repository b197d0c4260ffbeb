"""File ingest: remember ingested files by content digest, and where each result came from.

Revision ID: 0002
Revises: 0001
"""

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "ingested_file",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("study_id", sa.Integer, sa.ForeignKey("study.id"), nullable=False),
        sa.Column("digest", sa.String(64), nullable=False),
        sa.Column("path", sa.Text, nullable=False),
        sa.Column("rows", sa.Integer, nullable=False),
        sa.Column("ingested_at", sa.Float, nullable=False),
        sa.UniqueConstraint("study_id", "digest"),
    )
    with op.batch_alter_table("result") as batch:
        batch.add_column(sa.Column("source", sa.String(80)))


def downgrade() -> None:
    with op.batch_alter_table("result") as batch:
        batch.drop_column("source")
    op.drop_table("ingested_file")
