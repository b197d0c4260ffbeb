"""Ending a run from an ingested results file that carries its attempt (a scheduler job's file)."""

from __future__ import annotations

import time
from collections.abc import Sequence

from sqlalchemy import Connection, select

from fewshot.ledger.finals import primary_metric
from fewshot.ledger.models import FINAL_STEP, ResultRow
from fewshot.ledger.runs import find_run, finish_run, lock_run
from fewshot.results_format import ResultLine

__all__ = ["settle_after_ingest"]


def settle_after_ingest(
    conn: Connection, sid: int, name: str, lines: Sequence[ResultLine], attempt: int | None
) -> str | None:
    """After the lines of one attempt were stored: mark the run done when it now has the final
    result of the primary metric, failed when it has not and the attempt's lease ran out; None
    (nothing changed) otherwise, or when no attempt holds the run."""
    attempt = attempt or next((ln.attempt for ln in lines if ln.attempt is not None), None)
    keys = {ln.run for ln in lines}
    if attempt is None or len(keys) != 1:
        return None
    run = lock_run(conn, find_run(conn, sid, keys.pop(), name))
    if run.status != "running" or run.attempts != attempt:
        return None
    metric = primary_metric(conn, sid)
    final = conn.execute(
        select(ResultRow.id).where(
            ResultRow.run_id == run.id, ResultRow.metric == metric, ResultRow.step == FINAL_STEP
        )
    ).first()
    if final is not None:
        finish_run(conn, run, "done")
        return "done"
    if (run.lease_expires or 0) < time.time():
        finish_run(
            conn,
            run,
            "failed",
            f"attempt {attempt}'s lease ran out and its results file has no final {metric}",
        )
        return "failed"
    return None
