"""Putting a study right by hand: voiding results and retrying runs.

``void`` takes results out of every statistic without deleting them: they move to the
``void_result`` table with who voided them, when and why, and a run whose final result of the
primary metric was voided goes back to the plan. ``retry`` puts runs back to the plan; their
attempt count is kept (the next claim is the next attempt) and each retry is counted.
"""

from __future__ import annotations

import getpass
import json
import socket
import time
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Connection, delete, insert, select, update

from fewshot.errors import FewshotError, InvalidInput
from fewshot.ledger.connection import LedgerConnection
from fewshot.ledger.finals import primary_metric
from fewshot.ledger.models import (
    FINAL_STEP,
    ArmRow,
    ResultRow,
    ResultValueRow,
    RunRow,
    TaskRow,
    VoidResultRow,
)
from fewshot.ledger.runs import find_run, lock_run

__all__ = ["LedgerRepairs", "VoidReport", "who"]


def who() -> str:
    """``user@host`` of this process, for the record of a void."""
    try:
        user = getpass.getuser()
    except (KeyError, OSError):  # no user name in a container's passwd
        user = "unknown"
    return f"{user}@{socket.gethostname()}"[:200]


@dataclass(frozen=True)
class VoidReport:
    """What :meth:`LedgerRepairs.void` did.

    Attributes
    ----------
    run : str
    voided : int
        Results voided.
    replanned : bool
        True when the run's final result of the primary metric was voided and the run went
        back to the plan.
    """

    run: str
    voided: int
    replanned: bool


class LedgerRepairs(LedgerConnection):
    """The methods of :class:`fewshot.ledger.Ledger` that put results and runs right by hand."""

    def void(
        self, run: str, *, reason: str, metric: str | None = None, by: str | None = None
    ) -> VoidReport:
        """Void the results of ``run`` (of ``metric`` only, when given): they are kept, with
        ``by`` (default: user@host), the time and ``reason``, and left out of every statistic.
        When the run's final result of the study's primary metric is voided, the run goes back
        to the plan (its attempt count kept) so that it runs again."""
        if not isinstance(reason, str) or not reason.strip():
            raise InvalidInput("`reason` must say why the results are voided (a non-empty text).")
        who_ = by if by is not None else who()

        def go(c: Connection) -> VoidReport:
            sid, name = self._sid(c)
            row = lock_run(c, find_run(c, sid, run, name))
            q = select(ResultRow).where(ResultRow.run_id == row.id)
            if metric is not None:
                q = q.where(ResultRow.metric == metric)
            results = c.execute(q.order_by(ResultRow.id)).all()
            if not results:
                what = "" if metric is None else f" of metric {metric!r}"
                raise InvalidInput(f"run {run!r} has no results{what} to void.")
            now = time.time()
            for r in results:
                _move_to_void(c, r, now, reason.strip(), who_)
            main = primary_metric(c, sid)
            replanned = row.status != "planned" and any(
                r.metric == main and r.step == FINAL_STEP for r in results
            )
            if replanned:
                _replan(c, row.id, message=f"final {main} voided: {reason.strip()}"[-4000:])
            return VoidReport(run, len(results), replanned)

        return self._tx(go)

    def retry(
        self,
        runs: Sequence[str] = (),
        *,
        failed: bool = False,
        arm: str | None = None,
        task: str | None = None,
        size: int | None = None,
        seed: int | None = None,
    ) -> list[str]:
        """Put runs back to the plan: the ``runs`` named, every failed run (``failed``), or the
        runs matching ``arm``, ``task``, ``size`` and ``seed`` (those not planned already).
        Returns their keys. Attempts are kept (the next claim is the next attempt); a run held
        by a live lease is refused (stop its worker, or wait for the lease to run out)."""
        by_fields = any(v is not None for v in (arm, task, size, seed))
        if sum([bool(runs), failed, by_fields]) != 1:
            raise InvalidInput(
                "name the runs to retry one way: run keys (`runs`), every failed run "
                "(`failed`), or `arm`/`task`/`size`/`seed`."
            )

        def go(c: Connection) -> list[str]:
            sid, name = self._sid(c)
            if runs:
                rows = [lock_run(c, find_run(c, sid, k, name)) for k in dict.fromkeys(runs)]
            else:
                rows = _select_runs(c, sid, failed, arm, task, size, seed)
                if not rows:
                    raise InvalidInput(
                        "no run to retry matches: "
                        + (
                            "no run has failed, so `failed` finds none."
                            if failed
                            else _fields(arm, task, size, seed)
                        )
                    )
            now = time.time()
            live = [r for r in rows if r.status == "running" and (r.lease_expires or 0) >= now]
            if live:
                raise FewshotError(
                    f"run {live[0].key!r} is running (attempt {live[0].attempts}, worker "
                    f"{live[0].worker!r}) and its lease holds: it cannot be retried now. Stop its "
                    "worker, or wait for the lease to run out."
                )
            again = [r for r in rows if r.status != "planned"]
            for r in again:
                _replan(c, r.id, retries=RunRow.retries + 1)
            return [str(r.key) for r in again]

        return self._tx(go)


def _replan(c: Connection, run_id: int, **values: Any) -> None:
    """Put a run back to the plan: no worker, no lease; its attempts kept."""
    c.execute(
        update(RunRow)
        .where(RunRow.id == run_id)
        .values(status="planned", worker=None, lease_expires=None, **values)
    )


def _fields(arm: str | None, task: str | None, size: int | None, seed: int | None) -> str:
    given = {"arm": arm, "task": task, "size": size, "seed": seed}
    return ", ".join(f"{k} = {v!r}" for k, v in given.items() if v is not None) + "."


def _select_runs(
    c: Connection,
    sid: int,
    failed: bool,
    arm: str | None,
    task: str | None,
    size: int | None,
    seed: int | None,
) -> list[Any]:
    q = (
        select(RunRow)
        .join(ArmRow, ArmRow.id == RunRow.arm_id)
        .join(TaskRow, TaskRow.id == RunRow.task_id)
        .where(RunRow.study_id == sid, RunRow.status != "planned")
        .order_by(RunRow.id)
    )
    if failed:
        q = q.where(RunRow.status == "failed")
    if arm is not None:
        q = q.where(ArmRow.name == arm)
    if task is not None:
        q = q.where(TaskRow.name == task)
    if size is not None:
        q = q.where(RunRow.size == size)
    if seed is not None:
        q = q.where(RunRow.seed == seed)
    if c.dialect.name == "postgresql":
        q = q.with_for_update(of=RunRow)
    return list(c.execute(q).all())


def _move_to_void(c: Connection, r: Any, now: float, reason: str, by: str) -> None:
    values = [
        v
        for (v,) in c.execute(
            select(ResultValueRow.value)
            .where(ResultValueRow.result_id == r.id)
            .order_by(ResultValueRow.idx)
        ).all()
    ]
    c.execute(
        insert(VoidResultRow).values(
            run_id=r.run_id,
            metric=r.metric,
            step=r.step,
            value=r.value,
            n_values=r.n_values,
            values_json=json.dumps(values),
            subset_digest=r.subset_digest,
            budget_json=r.budget_json,
            recorded_at=r.recorded_at,
            source=r.source,
            attempt=r.attempt,
            forced=bool(r.forced),
            final_from_step=r.final_from_step,
            void_at=now,
            void_reason=reason,
            void_by=by,
        )
    )
    c.execute(delete(ResultValueRow).where(ResultValueRow.result_id == r.id))
    c.execute(delete(ResultRow).where(ResultRow.id == r.id))
