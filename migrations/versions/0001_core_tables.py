"""Core tables: studies, arms, tasks, draws, subsets, runs and results.

Revision ID: 0001
Revises:
"""

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "study",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("name", sa.String(64), nullable=False, unique=True),
        sa.Column("metric", sa.String(200), nullable=False),
        sa.Column("higher_is_better", sa.Boolean, nullable=False),
        sa.Column("replicates", sa.Integer, nullable=False),
        sa.Column("baseline", sa.String(64), nullable=False),
        sa.Column("spec_json", sa.Text, nullable=False),
        sa.Column("created_at", sa.Float, nullable=False),
    )
    op.create_table(
        "arm",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("study_id", sa.Integer, sa.ForeignKey("study.id"), nullable=False),
        sa.Column("name", sa.String(64), nullable=False),
        sa.Column("role", sa.String(16), nullable=False),
        sa.Column("checkpoint", sa.Text),
        sa.Column("zero_shot", sa.Boolean, nullable=False),
        sa.Column("attributes_json", sa.Text, nullable=False),
        sa.UniqueConstraint("study_id", "name"),
    )
    op.create_table(
        "task",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("study_id", sa.Integer, sa.ForeignKey("study.id"), nullable=False),
        sa.Column("name", sa.String(64), nullable=False),
        sa.Column("pool_file", sa.Text, nullable=False),
        sa.Column("pool_digest", sa.String(64), nullable=False),
        sa.Column("lineage_json", sa.Text, nullable=False),
        sa.Column("floor", sa.Float),
        sa.Column("expert", sa.Float),
        sa.Column("grp", sa.String(64)),
        sa.UniqueConstraint("study_id", "name"),
    )
    op.create_table(
        "draw",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("task_id", sa.Integer, sa.ForeignKey("task.id"), nullable=False),
        sa.Column("seed", sa.Integer, nullable=False),
        sa.Column("order_json", sa.Text, nullable=False),
        sa.Column("reserve_json", sa.Text, nullable=False),
        sa.UniqueConstraint("task_id", "seed"),
    )
    op.create_table(
        "subset",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("task_id", sa.Integer, sa.ForeignKey("task.id"), nullable=False),
        sa.Column("seed", sa.Integer, nullable=False),
        sa.Column("size", sa.Integer, nullable=False),
        sa.Column("digest", sa.String(64), nullable=False),
        sa.Column("ids_path", sa.Text, nullable=False),
        sa.UniqueConstraint("task_id", "seed", "size"),
    )
    op.create_table(
        "run",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("study_id", sa.Integer, sa.ForeignKey("study.id"), nullable=False),
        sa.Column("key", sa.String(300), nullable=False),
        sa.Column("arm_id", sa.Integer, sa.ForeignKey("arm.id"), nullable=False),
        sa.Column("task_id", sa.Integer, sa.ForeignKey("task.id"), nullable=False),
        sa.Column("subset_id", sa.Integer, sa.ForeignKey("subset.id"), nullable=False),
        sa.Column("size", sa.Integer, nullable=False),
        sa.Column("seed", sa.Integer, nullable=False),
        sa.Column("replicate", sa.Integer, nullable=False),
        sa.Column("status", sa.String(16), nullable=False),
        sa.Column("worker", sa.String(200)),
        sa.Column("lease_expires", sa.Float),
        sa.Column("attempts", sa.Integer, nullable=False),
        sa.Column("message", sa.Text),
        sa.Column("created_at", sa.Float, nullable=False),
        sa.Column("started_at", sa.Float),
        sa.Column("finished_at", sa.Float),
        sa.UniqueConstraint("study_id", "key"),
    )
    op.create_index("ix_run_claim", "run", ["study_id", "status", "lease_expires"])
    op.create_table(
        "result",
        sa.Column("id", sa.Integer, primary_key=True),
        sa.Column("run_id", sa.Integer, sa.ForeignKey("run.id"), nullable=False),
        sa.Column("metric", sa.String(200), nullable=False),
        sa.Column("step", sa.Integer, nullable=False),
        sa.Column("value", sa.Float, nullable=False),
        sa.Column("n_values", sa.Integer, nullable=False),
        sa.Column("subset_digest", sa.String(64)),
        sa.Column("budget_json", sa.Text),
        sa.Column("recorded_at", sa.Float, nullable=False),
        sa.UniqueConstraint("run_id", "metric", "step"),
    )
    op.create_table(
        "result_value",
        sa.Column("result_id", sa.Integer, sa.ForeignKey("result.id"), primary_key=True),
        sa.Column("idx", sa.Integer, primary_key=True),
        sa.Column("value", sa.Float, nullable=False),
    )


def downgrade() -> None:
    for table in ("result_value", "result", "run", "subset", "draw", "task", "arm", "study"):
        op.drop_table(table)
