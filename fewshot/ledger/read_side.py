"""The ledger's read side: runs, results (the tidy table of :mod:`fewshot.schema`), counts,
status, tasks, arms."""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any

import pandas as pd
from sqlalchemy import Connection, func, select

from fewshot.ledger.connection import LedgerConnection
from fewshot.ledger.models import (
    FINAL_STEP,
    ArmRow,
    ResultRow,
    RunRow,
    StudyRow,
    SubsetRow,
    TaskRow,
)
from fewshot.ledger.status import StatusReport, summarise
from fewshot.schema import RESULT_COLUMNS, RUN_COLUMNS

__all__ = ["LedgerReads"]


class LedgerReads(LedgerConnection):
    """The methods of :class:`fewshot.ledger.Ledger` that only read."""

    def runs(self, statuses: Sequence[str] | None = None) -> pd.DataFrame:
        """Runs of the study with their subset: columns key, arm, role, task, size, seed,
        replicate, status, worker, lease_expires, attempts, message, subset_file, subset_digest."""

        def go(c: Connection) -> pd.DataFrame:
            sid, _ = self._sid(c)
            q = (
                select(
                    RunRow.key,
                    ArmRow.name,
                    ArmRow.role,
                    TaskRow.name,
                    RunRow.size,
                    RunRow.seed,
                    RunRow.replicate,
                    RunRow.status,
                    RunRow.worker,
                    RunRow.lease_expires,
                    RunRow.attempts,
                    RunRow.message,
                    SubsetRow.ids_path,
                    SubsetRow.digest,
                )
                .join(ArmRow, ArmRow.id == RunRow.arm_id)
                .join(TaskRow, TaskRow.id == RunRow.task_id)
                .join(SubsetRow, SubsetRow.id == RunRow.subset_id)
                .where(RunRow.study_id == sid)
                .order_by(RunRow.id)
            )
            if statuses is not None:
                q = q.where(RunRow.status.in_(list(statuses)))
            return pd.DataFrame(
                c.execute(q).all(),
                columns=RUN_COLUMNS,
            )

        return self._tx(go)

    def results(self) -> pd.DataFrame:
        """One row per result. Columns: study, run, arm, role, task, group, size, seed,
        replicate, metric, step (NaN for the final evaluation), value, n_values,
        subset_digest, budget (JSON text or None), recorded_at (UTC timestamp)."""

        def go(c: Connection) -> pd.DataFrame:
            sid, name = self._sid(c)
            rows = c.execute(
                select(
                    RunRow.key,
                    ArmRow.name,
                    ArmRow.role,
                    TaskRow.name,
                    TaskRow.grp,
                    RunRow.size,
                    RunRow.seed,
                    RunRow.replicate,
                    ResultRow.metric,
                    ResultRow.step,
                    ResultRow.value,
                    ResultRow.n_values,
                    ResultRow.subset_digest,
                    ResultRow.budget_json,
                    ResultRow.recorded_at,
                )
                .join(RunRow, RunRow.id == ResultRow.run_id)
                .join(ArmRow, ArmRow.id == RunRow.arm_id)
                .join(TaskRow, TaskRow.id == RunRow.task_id)
                .where(RunRow.study_id == sid)
                .order_by(RunRow.id, ResultRow.metric, ResultRow.step)
            ).all()
            frame = pd.DataFrame(rows, columns=RESULT_COLUMNS[1:])
            frame.insert(0, "study", name)
            frame["step"] = frame["step"].astype("Int64").mask(frame["step"] == FINAL_STEP)
            frame["recorded_at"] = pd.to_datetime(frame["recorded_at"], unit="s", utc=True)
            return frame

        return self._tx(go)

    def counts(self) -> dict[str, int]:
        """How many runs have each status."""

        def go(c: Connection) -> dict[str, int]:
            sid, _ = self._sid(c)
            got = dict(
                c.execute(
                    select(RunRow.status, func.count())
                    .where(RunRow.study_id == sid)
                    .group_by(RunRow.status)
                ).all()
            )
            return {s: int(got.get(s, 0)) for s in ("planned", "running", "done", "failed")}

        return self._tx(go)

    def status(self) -> StatusReport:
        """The study's completion: runs per arm and size by status, expired leases, failures."""
        runs = self.runs()
        return summarise(self.study, self.url, runs, with_results=self._final_result_runs())

    def _final_result_runs(self) -> set[str]:
        """Keys of runs that are not done yet hold a final result of the study's metric."""

        def go(c: Connection) -> set[str]:
            sid, _ = self._sid(c)
            metric = c.execute(select(StudyRow.metric).where(StudyRow.id == sid)).scalar_one()
            q = (
                select(RunRow.key)
                .join(ResultRow, ResultRow.run_id == RunRow.id)
                .where(
                    RunRow.study_id == sid,
                    RunRow.status.in_(["planned", "running"]),
                    ResultRow.metric == metric,
                    ResultRow.step == FINAL_STEP,
                )
            )
            return set(c.execute(q).scalars())

        return self._tx(go)

    def tasks(self) -> pd.DataFrame:
        """The study's tasks: columns task, group, floor, expert, pool_file, pool_digest."""

        def go(c: Connection) -> pd.DataFrame:
            sid, _ = self._sid(c)
            rows = c.execute(
                select(
                    TaskRow.name,
                    TaskRow.grp,
                    TaskRow.floor,
                    TaskRow.expert,
                    TaskRow.pool_file,
                    TaskRow.pool_digest,
                )
                .where(TaskRow.study_id == sid)
                .order_by(TaskRow.id)
            ).all()
            return pd.DataFrame(
                rows, columns=["task", "group", "floor", "expert", "pool_file", "pool_digest"]
            )

        return self._tx(go)

    def arms(self) -> pd.DataFrame:
        """The study's arms: columns arm, role, checkpoint, zero_shot, and one column per attribute."""

        def go(c: Connection) -> pd.DataFrame:
            sid, _ = self._sid(c)
            rows = c.execute(
                select(
                    ArmRow.name,
                    ArmRow.role,
                    ArmRow.checkpoint,
                    ArmRow.zero_shot,
                    ArmRow.attributes_json,
                )
                .where(ArmRow.study_id == sid)
                .order_by(ArmRow.id)
            ).all()
            frame = pd.DataFrame(
                [
                    {
                        "arm": r[0],
                        "role": r[1],
                        "checkpoint": r[2],
                        "zero_shot": bool(r[3]),
                        **json.loads(r[4]),
                    }
                    for r in rows
                ]
            )
            return frame

        return self._tx(go)

    def study_row(self) -> dict[str, Any]:
        """The selected study's stored settings."""

        def go(c: Connection) -> dict[str, Any]:
            sid, _ = self._sid(c)
            r = c.execute(select(StudyRow).where(StudyRow.id == sid)).one()
            spec = json.loads(r.spec_json)
            bounds = spec.get("bounds")
            return {
                "name": r.name,
                "metric": r.metric,
                "higher_is_better": r.higher_is_better,
                "replicates": r.replicates,
                "baseline": r.baseline,
                # kept in the stored spec; ledgers planned before these keys existed lack them
                "metrics": tuple(spec.get("metrics") or (r.metric,)),
                "bounds": None if bounds is None else (float(bounds[0]), float(bounds[1])),
                "caution": spec.get("caution"),
                "file": spec.get("file"),  # the study file as planned
            }

        return self._tx(go)
