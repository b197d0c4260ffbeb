"""The ledger's tables as SQLAlchemy 2.x models.

Times are seconds since the epoch (UTC) as floats, so SQLite and PostgreSQL compare
them the same way. A result's ``step`` is ``-1`` for the final evaluation (a
trainer's ``step: null``), so that (run, metric, step) can be a plain unique key.
Whole numbers a user gives (seeds, sizes, steps) are 64-bit on both engines (0 to 2**63-1,
checked when they are parsed; see :mod:`fewshot.ranges`). Every change here needs an Alembic
revision in ``migrations/versions/``.
"""

from __future__ import annotations

from sqlalchemy import (
    BigInteger,
    Boolean,
    Float,
    ForeignKey,
    Index,
    Integer,
    String,
    Text,
    UniqueConstraint,
    false,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

FINAL_STEP = -1


class Base(DeclarativeBase):
    pass


class StudyRow(Base):
    __tablename__ = "study"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(64), unique=True)
    metric: Mapped[str] = mapped_column(String(200))
    higher_is_better: Mapped[bool] = mapped_column(Boolean)
    replicates: Mapped[int] = mapped_column(BigInteger)
    baseline: Mapped[str] = mapped_column(String(64))
    spec_json: Mapped[str] = mapped_column(Text)
    created_at: Mapped[float] = mapped_column(Float)


class ArmRow(Base):
    __tablename__ = "arm"
    __table_args__ = (UniqueConstraint("study_id", "name"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    study_id: Mapped[int] = mapped_column(ForeignKey("study.id"))
    name: Mapped[str] = mapped_column(String(64))
    role: Mapped[str] = mapped_column(String(16))
    checkpoint: Mapped[str | None] = mapped_column(Text, nullable=True)
    zero_shot: Mapped[bool] = mapped_column(Boolean)
    attributes_json: Mapped[str] = mapped_column(Text)


class TaskRow(Base):
    __tablename__ = "task"
    __table_args__ = (UniqueConstraint("study_id", "name"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    study_id: Mapped[int] = mapped_column(ForeignKey("study.id"))
    name: Mapped[str] = mapped_column(String(64))
    pool_file: Mapped[str] = mapped_column(Text)
    pool_digest: Mapped[str] = mapped_column(String(64))
    lineage_json: Mapped[str] = mapped_column(Text)
    floor: Mapped[float | None] = mapped_column(Float, nullable=True)
    expert: Mapped[float | None] = mapped_column(Float, nullable=True)
    grp: Mapped[str | None] = mapped_column(String(64), nullable=True)


class DrawRow(Base):
    """A seed's draw order (up to the largest size) and reserved ids, as JSON lists."""

    __tablename__ = "draw"
    __table_args__ = (UniqueConstraint("task_id", "seed"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    task_id: Mapped[int] = mapped_column(ForeignKey("task.id"))
    seed: Mapped[int] = mapped_column(BigInteger)
    order_json: Mapped[str] = mapped_column(Text)
    reserve_json: Mapped[str] = mapped_column(Text)


class SubsetRow(Base):
    __tablename__ = "subset"
    __table_args__ = (UniqueConstraint("task_id", "seed", "size"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    task_id: Mapped[int] = mapped_column(ForeignKey("task.id"))
    seed: Mapped[int] = mapped_column(BigInteger)
    size: Mapped[int] = mapped_column(BigInteger)
    digest: Mapped[str] = mapped_column(String(64))
    ids_path: Mapped[str] = mapped_column(Text)


class RunRow(Base):
    __tablename__ = "run"
    __table_args__ = (
        UniqueConstraint("study_id", "key"),
        Index("ix_run_claim", "study_id", "status", "lease_expires"),
    )
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    study_id: Mapped[int] = mapped_column(ForeignKey("study.id"))
    key: Mapped[str] = mapped_column(String(300))
    arm_id: Mapped[int] = mapped_column(ForeignKey("arm.id"))
    task_id: Mapped[int] = mapped_column(ForeignKey("task.id"))
    subset_id: Mapped[int] = mapped_column(ForeignKey("subset.id"))
    size: Mapped[int] = mapped_column(BigInteger)
    seed: Mapped[int] = mapped_column(BigInteger)
    replicate: Mapped[int] = mapped_column(BigInteger)
    status: Mapped[str] = mapped_column(String(16))
    worker: Mapped[str | None] = mapped_column(String(200), nullable=True)
    lease_expires: Mapped[float | None] = mapped_column(Float, nullable=True)
    attempts: Mapped[int] = mapped_column(BigInteger, default=0)
    message: Mapped[str | None] = mapped_column(Text, nullable=True)
    created_at: Mapped[float] = mapped_column(Float)
    started_at: Mapped[float | None] = mapped_column(Float, nullable=True)
    finished_at: Mapped[float | None] = mapped_column(Float, nullable=True)
    # how many times the run was put back to the plan by `retry` (its attempts are kept)
    retries: Mapped[int] = mapped_column(BigInteger, default=0, server_default="0")


class _ResultFields:
    """The columns a live result (:class:`ResultRow`) and a void one (:class:`VoidResultRow`)
    share."""

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("run.id"))
    metric: Mapped[str] = mapped_column(String(200))
    step: Mapped[int] = mapped_column(BigInteger)
    value: Mapped[float] = mapped_column(Float)
    n_values: Mapped[int] = mapped_column(BigInteger)
    subset_digest: Mapped[str | None] = mapped_column(String(64), nullable=True)
    budget_json: Mapped[str | None] = mapped_column(Text, nullable=True)
    recorded_at: Mapped[float] = mapped_column(Float)
    source: Mapped[str | None] = mapped_column(String(80), nullable=True)
    # the attempt of the run that wrote this result (None: written by hand, without an attempt)
    attempt: Mapped[int | None] = mapped_column(BigInteger, nullable=True)
    # stored by hand on a run no attempt held (`force`), so a reader can tell
    forced: Mapped[bool] = mapped_column(Boolean, default=False, server_default=false())
    # a final result taken from the run's last reported step when it was marked done: that step
    final_from_step: Mapped[int | None] = mapped_column(BigInteger, nullable=True)


class ResultRow(_ResultFields, Base):
    __tablename__ = "result"
    __table_args__ = (UniqueConstraint("run_id", "metric", "step"),)


class VoidResultRow(_ResultFields, Base):
    """A result taken out of the statistics by ``void``: kept, with who voided it, when and why
    (its per-episode values as a JSON list)."""

    __tablename__ = "void_result"
    values_json: Mapped[str] = mapped_column(Text)
    void_at: Mapped[float] = mapped_column(Float)
    void_reason: Mapped[str] = mapped_column(Text)
    void_by: Mapped[str] = mapped_column(String(200))


class ResultValueRow(Base):
    """Per-episode evaluation values behind a result."""

    __tablename__ = "result_value"
    result_id: Mapped[int] = mapped_column(ForeignKey("result.id"), primary_key=True)
    idx: Mapped[int] = mapped_column(Integer, primary_key=True)
    value: Mapped[float] = mapped_column(Float)


class IngestedFileRow(Base):
    __tablename__ = "ingested_file"
    __table_args__ = (UniqueConstraint("study_id", "digest"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    study_id: Mapped[int] = mapped_column(ForeignKey("study.id"))
    digest: Mapped[str] = mapped_column(String(64))
    path: Mapped[str] = mapped_column(Text)
    rows: Mapped[int] = mapped_column(BigInteger)
    ingested_at: Mapped[float] = mapped_column(Float)


# The columns a stored result writes to the result table, in the order in which
# results._insert_fresh builds its row tuples (a final taken from a step copies all but the step).
RESULT_WRITE_COLUMNS = (
    "run_id",
    "metric",
    "step",
    "value",
    "n_values",
    "subset_digest",
    "budget_json",
    "recorded_at",
    "source",
    "attempt",
    "forced",
)
