"""64-bit whole numbers on PostgreSQL, and the attempt that wrote each result.

Seeds, sizes, replicates, attempts, steps and counts become BIGINT on PostgreSQL, so that the
same range (0 to 2**63-1) fits on both engines (SQLite's INTEGER is already 64-bit). A result
remembers the attempt of its run that wrote it (NULL when written by hand), so that a newer
attempt's value can take the place of an older attempt's.

Revision ID: 0003
Revises: 0002
"""

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None

WIDENED = {
    "draw": ("seed",),
    "subset": ("seed", "size"),
    "run": ("size", "seed", "replicate", "attempts"),
    "result": ("step", "n_values"),
    "ingested_file": ("rows",),
    "study": ("replicates",),
}


def upgrade() -> None:
    if op.get_bind().dialect.name == "postgresql":
        for table, columns in WIDENED.items():
            for column in columns:
                op.alter_column(table, column, type_=sa.BigInteger(), existing_type=sa.Integer())
    with op.batch_alter_table("result") as batch:
        batch.add_column(sa.Column("attempt", sa.BigInteger(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("result") as batch:
        batch.drop_column("attempt")
    if op.get_bind().dialect.name == "postgresql":
        for table, columns in WIDENED.items():
            for column in columns:
                op.alter_column(table, column, type_=sa.Integer(), existing_type=sa.BigInteger())
