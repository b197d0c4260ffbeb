"""The ledger's read side: runs, results (the tidy table of :mod:`fewshot.schema`), counts,
status, tasks, arms."""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import replace
from typing import Any

import pandas as pd
from sqlalchemy import Connection, and_, case, func, literal, null, select

from fewshot.ledger.connection import LedgerConnection
from fewshot.ledger.models import (
    FINAL_STEP,
    ArmRow,
    ResultRow,
    RunRow,
    StudyRow,
    SubsetRow,
    TaskRow,
    VoidResultRow,
)
from fewshot.ledger.status import StatusReport, summarise
from fewshot.schema import RESULT_COLUMNS, RUN_COLUMNS

__all__ = ["LedgerReads"]


class LedgerReads(LedgerConnection):
    """The methods of :class:`fewshot.ledger.Ledger` that only read."""

    def runs(self, statuses: Sequence[str] | None = None) -> pd.DataFrame:
        """Runs of the study with their subset: columns key, arm, role, task, size, seed,
        replicate, status, worker, lease_expires, attempts, message, subset_file, subset_digest,
        retries (times ``retry`` put the run back to the plan)."""

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
                    RunRow.retries,
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

    def results(self, *, include_running: bool = False, include_void: bool = False) -> pd.DataFrame:
        """One row per result, with :data:`fewshot.RESULT_COLUMNS` (step NaN for the final
        evaluation).

        By default only what a run's score may come from: results of done runs, not void. With
        ``include_running`` also results of runs not done (planned, running, failed; the
        ``run_status`` column says which); with ``include_void`` also voided results (``void``,
        with who voided them, when and why).
        """

        def go(c: Connection) -> pd.DataFrame:
            sid, name = self._sid(c)
            frames = [self._result_rows(c, sid, ResultRow, include_running)]
            if include_void:
                frames.append(self._result_rows(c, sid, VoidResultRow, include_running))
            frame = pd.concat(frames, ignore_index=True) if len(frames) > 1 else frames[0]
            frame = frame.sort_values(["_order", "metric", "step", "void"], kind="stable")
            frame = frame.drop(columns="_order").reset_index(drop=True)
            frame.insert(0, "study", name)
            frame["step"] = frame["step"].astype("Int64").mask(frame["step"] == FINAL_STEP)
            frame["final_from_step"] = frame["final_from_step"].astype("Int64")
            frame["forced"] = frame["forced"].astype(bool)
            frame["void"] = frame["void"].astype(bool)
            for col in ("recorded_at", "void_at"):
                frame[col] = pd.to_datetime(frame[col], unit="s", utc=True)
            return frame[RESULT_COLUMNS]

        return self._tx(go)

    @staticmethod
    def _result_rows(
        c: Connection, sid: int, table: type[ResultRow] | type[VoidResultRow], running: bool
    ) -> pd.DataFrame:
        void = table is VoidResultRow
        cols = [
            RunRow.key,
            ArmRow.name,
            ArmRow.role,
            TaskRow.name,
            TaskRow.grp,
            RunRow.size,
            RunRow.seed,
            RunRow.replicate,
            table.metric,
            table.step,
            table.value,
            table.n_values,
            table.subset_digest,
            table.budget_json,
            table.recorded_at,
            RunRow.status,
            table.final_from_step,
            table.forced,
            literal(void),
            VoidResultRow.void_at if void else null(),
            VoidResultRow.void_reason if void else null(),
            VoidResultRow.void_by if void else null(),
            RunRow.id,
        ]
        q = (
            select(*cols)
            .join(RunRow, RunRow.id == table.run_id)
            .join(ArmRow, ArmRow.id == RunRow.arm_id)
            .join(TaskRow, TaskRow.id == RunRow.task_id)
            .where(RunRow.study_id == sid)
        )
        if not running:
            q = q.where(RunRow.status == "done")
        return pd.DataFrame(c.execute(q).all(), columns=[*RESULT_COLUMNS[1:], "_order"])

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
        """The study's completion: runs per arm and size by status, expired leases, failures,
        attempts and retries, and counts of void, forced and step-taken results."""
        runs = self.runs()
        unmarked, counts = self._result_facts()
        rep = summarise(self.study, self.url, runs, with_results=unmarked)
        return replace(
            rep, voided=counts["voided"], forced=counts["forced"], from_step=counts["from_step"]
        )

    def _result_facts(self) -> tuple[set[str], dict[str, int]]:
        """In one read of the result table: keys of runs not done that hold a final result of
        the study's metric, and the counts of forced and step-taken results (and, from the void
        table, of void ones)."""

        def go(c: Connection) -> tuple[set[str], dict[str, int]]:
            sid, _ = self._sid(c)
            metric = c.execute(select(StudyRow.metric).where(StudyRow.id == sid)).scalar_one()
            final_unmarked = and_(
                RunRow.status.in_(["planned", "running"]),
                ResultRow.metric == metric,
                ResultRow.step == FINAL_STEP,
            )
            rows = c.execute(
                select(
                    RunRow.key,
                    func.max(case((final_unmarked, 1), else_=0)),
                    func.sum(case((ResultRow.forced.is_(True), 1), else_=0)),
                    func.sum(case((ResultRow.final_from_step.is_not(None), 1), else_=0)),
                )
                .join(RunRow, RunRow.id == ResultRow.run_id)
                .where(RunRow.study_id == sid)
                .group_by(RunRow.key)
            ).all()
            voided = c.execute(
                select(func.count())
                .select_from(VoidResultRow)
                .join(RunRow, RunRow.id == VoidResultRow.run_id)
                .where(RunRow.study_id == sid)
            ).scalar_one()
            counts = {
                "voided": int(voided),
                "forced": int(sum(r[2] or 0 for r in rows)),
                "from_step": int(sum(r[3] or 0 for r in rows)),
            }
            return {str(r[0]) for r in rows if r[1]}, counts

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
                    {  # the arm's own columns win over an attribute of the same name
                        **json.loads(r[4]),
                        "arm": r[0],
                        "role": r[1],
                        "checkpoint": r[2],
                        "zero_shot": bool(r[3]),
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
