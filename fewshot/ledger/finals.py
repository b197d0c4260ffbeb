"""A run's final result: what makes a run complete, and the final taken from its last step.

A run counts as done only with a final result of the study's primary metric. A trainer marks
its final evaluation explicitly (``final``); when a run is marked done without one but with
results at training steps, the last reported step's result becomes the final one, and the
ledger records which step it was taken from (``final_from_step``), so exports and status show it.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import Connection, insert, select

from fewshot.errors import FewshotError
from fewshot.ledger.models import (
    FINAL_STEP,
    RESULT_WRITE_COLUMNS,
    ResultRow,
    ResultValueRow,
    StudyRow,
)

__all__ = ["Incomplete", "ensure_final", "primary_metric"]

# what a final taken from a step keeps of that step's result: every written column but the step
COPIED = tuple(c for c in RESULT_WRITE_COLUMNS if c != "step")


class Incomplete(FewshotError, ValueError):
    """A run marked done without a final result of the study's primary metric."""

    def __init__(self, key: str, metric: str) -> None:
        super().__init__(
            f"run {key!r} cannot be marked done: it has no final {metric!r} (no result marked "
            f"final and none at a training step). Record its final evaluation first (`final`), "
            "or mark it failed."
        )
        self.key = key
        self.metric = metric


def primary_metric(conn: Connection, study_id: int) -> str:
    """The study's primary metric."""
    return str(conn.execute(select(StudyRow.metric).where(StudyRow.id == study_id)).scalar_one())


def ensure_final(conn: Connection, run: Any) -> bool:
    """True when ``run`` has a final result of its study's primary metric, taking it from the
    last reported step when there is none yet (caller's transaction); False when it has neither."""
    metric = primary_metric(conn, run.study_id)
    of_run = (ResultRow.run_id == run.id, ResultRow.metric == metric)
    if conn.execute(select(ResultRow.id).where(*of_run, ResultRow.step == FINAL_STEP)).first():
        return True
    # the last reported step: the largest (the final's -1 is not among them, as there is none)
    last = conn.execute(
        select(ResultRow).where(*of_run).order_by(ResultRow.step.desc()).limit(1)
    ).first()
    if last is None:
        return False
    copied = {c: getattr(last, c) for c in COPIED}
    new_id = conn.execute(
        insert(ResultRow)
        .values(**copied, step=FINAL_STEP, final_from_step=last.step)
        .returning(ResultRow.id)
    ).scalar_one()
    values = conn.execute(
        select(ResultValueRow.idx, ResultValueRow.value).where(ResultValueRow.result_id == last.id)
    ).all()
    if values:
        conn.execute(
            insert(ResultValueRow),
            [{"result_id": new_id, "idx": i, "value": v} for i, v in values],
        )
    return True
