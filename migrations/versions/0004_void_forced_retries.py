"""Void results, forced results, finals taken from a step, and retries.

A voided result moves to ``void_result`` with who voided it, when and why (the live ``result``
table keeps its plain (run, metric, step) key, so a run whose final was voided can report a new
one). A result stored by hand on a run no attempt held is ``forced``; a final result taken from the
run's last reported step when it was marked done names that step (``final_from_step``). A run
remembers how many times ``retry`` put it back to the plan (``retries``).

Revision ID: 0004
Revises: 0003
"""

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def upgrade() -> None:
    # plain ADD COLUMN (a batch would rebuild the tables, which SQLite's foreign keys forbid
    # inside the upgrade's transaction)
    op.add_column(
        "result", sa.Column("forced", sa.Boolean(), nullable=False, server_default=sa.false())
    )
    op.add_column("result", sa.Column("final_from_step", sa.BigInteger(), nullable=True))
    op.add_column("run", sa.Column("retries", sa.BigInteger(), nullable=False, server_default="0"))
    op.create_table(
        "void_result",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("run_id", sa.Integer, sa.ForeignKey("run.id"), nullable=False),
        sa.Column("metric", sa.String(200), nullable=False),
        sa.Column("step", sa.BigInteger, nullable=False),
        sa.Column("value", sa.Float, nullable=False),
        sa.Column("n_values", sa.BigInteger, nullable=False),
        sa.Column("values_json", sa.Text, nullable=False),
        sa.Column("subset_digest", sa.String(64)),
        sa.Column("budget_json", sa.Text),
        sa.Column("recorded_at", sa.Float, nullable=False),
        sa.Column("source", sa.String(80)),
        sa.Column("attempt", sa.BigInteger),
        sa.Column("forced", sa.Boolean, nullable=False),
        sa.Column("final_from_step", sa.BigInteger),
        sa.Column("void_at", sa.Float, nullable=False),
        sa.Column("void_reason", sa.Text, nullable=False),
        sa.Column("void_by", sa.String(200), nullable=False),
    )


def downgrade() -> None:
    op.drop_table("void_result")
    with op.batch_alter_table("run") as batch:
        batch.drop_column("retries")
    with op.batch_alter_table("result") as batch:
        batch.drop_column("final_from_step")
        batch.drop_column("forced")
