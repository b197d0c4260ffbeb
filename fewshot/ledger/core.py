"""The :class:`Ledger`: one study's runs and results in SQLite or PostgreSQL."""

from __future__ import annotations

import errno
import json
import math
import os
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TypeVar

import pandas as pd
from sqlalchemy import Connection, Engine, func, insert, select
from sqlalchemy.exc import IntegrityError, OperationalError

from fewshot.errors import FewshotError
from fewshot.ledger import draws_undo
from fewshot.ledger.engine import (
    LedgerError,
    first_line,
    make_engine,
    mask_url,
    resolve_url,
    retry_locked,
    sqlite_path,
    upgrade_schema,
)
from fewshot.ledger.models import (
    FINAL_STEP,
    ArmRow,
    IngestedFileRow,
    ResultRow,
    RunRow,
    StudyRow,
    SubsetRow,
    TaskRow,
)
from fewshot.ledger.planning import PlanReport, draw_all, plan_study
from fewshot.ledger.results import (
    ResultFileError,
    ResultLine,
    StoreReport,
    check_line,
    file_digest_bytes,
    parse_result_file,
    store_results,
)
from fewshot.ledger.runs import (
    Claim,
    claim_run,
    extend_lease,
    find_run,
    finish_run,
    release_run,
    settle_run,
)
from fewshot.ledger.status import StatusReport, summarise
from fewshot.ledger.storage import check_ledger_file, storage_error
from fewshot.study import Study

__all__ = ["Ledger", "IngestReport", "RESULT_COLUMNS"]

T = TypeVar("T")
CONFLICT_RETRIES = 5

RESULT_COLUMNS = [
    "study",
    "run",
    "arm",
    "role",
    "task",
    "group",
    "size",
    "seed",
    "replicate",
    "metric",
    "step",
    "value",
    "n_values",
    "subset_digest",
    "budget",
    "recorded_at",
]


@dataclass(frozen=True)
class IngestReport:
    """What ingesting one file did.

    Attributes
    ----------
    path : str
    lines : int
        Result lines in the file.
    skipped : bool
        True when a file with the same content was ingested before (nothing written).
    stored, unchanged, replaced, ignored : int
        ``ignored``: results of an attempt no longer current that were left out (see
        :func:`fewshot.ledger.results.store_results`).
    """

    path: str
    lines: int
    skipped: bool
    stored: int = 0
    unchanged: int = 0
    replaced: int = 0
    ignored: int = 0


class Ledger:
    """A ledger database, with one study selected.

    Open it with :meth:`Ledger.open`; plan a study with :meth:`plan`; hand runs out with
    :meth:`claim`; take results with :meth:`record` and :meth:`ingest`; read them back with
    :meth:`results`.
    """

    #: How long a call keeps trying to reach a database server that went away (a restart, a
    #: network blip) before it gives up with a message.
    reconnect_seconds: float = 300.0

    def __init__(self, engine: Engine, url: str, study: str | None = None) -> None:
        self.engine = engine
        self._url = url
        self._study_name = study
        self._skip_locked = engine.dialect.name == "postgresql"
        self._path = sqlite_path(url)

    # ------------------------------------------------------------------ opening

    @classmethod
    def open(
        cls, url: str | Path | None = None, *, study: str | None = None, create: bool = True
    ) -> Ledger:
        """Open (creating or upgrading) the ledger at ``url``: a path or SQLAlchemy URL,
        else ``$FEWSHOT_LEDGER``, else ``fewshot.sqlite`` in the working directory.

        With ``create=False`` a SQLite ledger file that does not exist yet is an error instead
        of a new, empty ledger (what every command but ``init`` wants).
        """
        resolved = resolve_url(url)
        path = sqlite_path(resolved)
        if not create and path is not None and not path.exists():
            raise LedgerError(
                f"no ledger at {path}. Run `fewshot init STUDY.toml` there first, or point --ledger "
                "(or FEWSHOT_LEDGER) at the study's ledger."
            )
        if not create and path is not None and path.is_file() and path.stat().st_size == 0:
            raise LedgerError(
                f"{path} is an empty file, not a ledger; it was left as it is. Run `fewshot init "
                "STUDY.toml --ledger PATH` to make a ledger, or point --ledger at the study's ledger."
            )
        if path is not None:
            check_ledger_file(path)
        engine = make_engine(resolved)
        try:
            upgrade_schema(engine)
        except OperationalError as exc:
            engine.dispose()
            raise storage_error(exc, resolved, path, opening=True) from None
        except BaseException:
            engine.dispose()
            raise
        return cls(engine, resolved, study)

    @property
    def url(self) -> str:
        """The ledger's URL with any password masked."""
        return mask_url(self._url)

    @property
    def connect_url(self) -> str:
        """The full URL (with any password) for handing to a trainer's environment; never print it."""
        return self._url

    def close(self) -> None:
        """Release the ledger's connections."""
        self.engine.dispose()

    def __enter__(self) -> Ledger:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _tx(self, fn: Callable[[Connection], T]) -> T:
        """Run ``fn`` in one transaction.

        A unique-constraint violation means another process wrote the same thing first (two
        ``init`` of one study, one file ingested twice at once, ``record`` against ``ingest``): the
        transaction is run again, and now sees that write and gives the usual answer (nothing new
        to plan, the file was ingested before, the value is already there or conflicts).
        """

        def attempt() -> T:
            with self.engine.begin() as conn:
                return fn(conn)

        for k in range(CONFLICT_RETRIES):
            try:
                return retry_locked(
                    attempt, reconnect_seconds=self.reconnect_seconds, url=self._url
                )
            except OperationalError as exc:
                # a full disk, a read-only or damaged file, a lock held too long: a message
                raise storage_error(exc, self._url, self._path) from None
            except IntegrityError as exc:
                if k == CONFLICT_RETRIES - 1:
                    raise LedgerError(
                        f"the ledger {self.url} refused a write {CONFLICT_RETRIES} times because "
                        f"another process kept writing the same rows ({first_line(exc.orig)}). "
                        "Nothing of this call was stored; run it again."
                    ) from None
        raise AssertionError("unreachable")

    def studies(self) -> list[str]:
        """The names of the studies in this ledger."""
        return self._tx(lambda c: sorted(c.execute(select(StudyRow.name)).scalars()))

    def _sid(self, conn: Connection) -> tuple[int, str]:
        names = dict(conn.execute(select(StudyRow.name, StudyRow.id)).all())
        if self._study_name is not None:
            if self._study_name not in names:
                known = ", ".join(sorted(names)) or "none yet"
                raise LedgerError(
                    f"the ledger {self.url} has no study {self._study_name!r} (studies: {known}). "
                    "Check --study, or run `fewshot init STUDY.toml`."
                )
            return names[self._study_name], self._study_name
        if not names:
            raise LedgerError(
                f"the ledger {self.url} holds no study yet. Run `fewshot init STUDY.toml` first "
                "(or point --ledger / FEWSHOT_LEDGER at the study's ledger)."
            )
        if len(names) > 1:
            raise LedgerError(
                f"the ledger {self.url} holds several studies ({', '.join(sorted(names))}); "
                "pick one with --study NAME."
            )
        name = next(iter(names))
        return names[name], name

    @property
    def study(self) -> str:
        """The selected study's name."""
        return self._tx(lambda c: self._sid(c)[1])

    # ------------------------------------------------------------------ planning

    def plan(self, study: Study) -> PlanReport:
        """Draw every task's subsets and plan every run of ``study`` not yet planned."""
        draws = draw_all(study)
        before = draws_undo.snapshot(study.draws_dir, [t.name for t in study.tasks])
        try:
            report = self._tx(lambda c: plan_study(c, study, draws))
        except BaseException as exc:
            # the transaction failed: the ledger is as it was, and so must the draws be
            draws_undo.restore(before)
            if isinstance(exc, OSError):
                raise LedgerError(
                    f"cannot write the draws under {study.draws_dir} ({exc.strerror or exc}): "
                    "nothing was planned and the draws were left as they were. "
                    + (
                        "Free some space on that disk, then run init again."
                        if exc.errno == errno.ENOSPC
                        else "Check that you may write there, then run init again."
                    )
                ) from None
            raise
        if self._study_name is None:
            self._study_name = study.name
        return report

    # ------------------------------------------------------------------ runs

    def claim(self, worker: str, lease: float = 7200.0) -> Claim | None:
        """Atomically claim one planned run (or one whose lease expired) for ``worker``."""
        _check_worker(worker)
        _check_lease(lease)

        def go(c: Connection) -> Claim | None:
            sid, _ = self._sid(c)
            return claim_run(c, sid, worker, lease, skip_locked=self._skip_locked)

        return self._tx(go)

    def heartbeat(
        self, run: str, worker: str, lease: float = 7200.0, *, attempt: int | None = None
    ) -> bool:
        """Extend ``worker``'s lease on ``run``; False when the worker (and ``attempt``, when
        given) no longer holds it."""
        _check_lease(lease)

        def go(c: Connection) -> bool:
            sid, name = self._sid(c)
            return extend_lease(c, find_run(c, sid, run, name), worker, lease, attempt)

        return self._tx(go)

    def release(self, run: str, worker: str, *, attempt: int | None = None) -> bool:
        """Hand ``run`` back to the plan when ``worker`` (and ``attempt``, when given) holds it
        (e.g. the worker was stopped)."""

        def go(c: Connection) -> bool:
            sid, name = self._sid(c)
            return release_run(c, find_run(c, sid, run, name), worker, attempt)

        return self._tx(go)

    def done(self, run: str, *, attempt: int | None = None) -> None:
        """Mark ``run`` done. With ``attempt`` (a worker's ``FEWSHOT_ATTEMPT``), only while that
        attempt is the run's current one: else :class:`StaleAttempt` and nothing changes."""
        self._finish(run, "done", None, attempt)

    def fail(self, run: str, message: str, *, attempt: int | None = None) -> None:
        """Mark ``run`` failed, keeping the (tail of the) message; ``attempt`` as for :meth:`done`."""
        self._finish(run, "failed", message, attempt)

    def _finish(self, run: str, status: str, message: str | None, attempt: int | None) -> None:
        def go(c: Connection) -> None:
            sid, name = self._sid(c)
            finish_run(c, find_run(c, sid, run, name), status, message, attempt=attempt)

        self._tx(go)

    def settle(self, run: str, attempt: int, status: str, message: str | None = None) -> str:
        """Mark ``run`` ``status`` if ``attempt`` still holds it and it is still running.

        Returns the status the run is left in, or ``superseded`` when a newer attempt holds it.
        """

        def go(c: Connection) -> str:
            sid, name = self._sid(c)
            return settle_run(c, find_run(c, sid, run, name), attempt, status, message)

        return self._tx(go)

    def run_status(self, run: str) -> str:
        """The status of ``run``: planned, running, done or failed."""

        def go(c: Connection) -> str:
            sid, name = self._sid(c)
            return find_run(c, sid, run, name).status

        return self._tx(go)

    # ------------------------------------------------------------------ results

    def record(
        self,
        run: str,
        metric: str,
        value: float,
        *,
        step: int | None = None,
        values: Sequence[float] | None = None,
        subset_digest: str | None = None,
        budget: dict[str, float] | None = None,
        replace: bool = False,
        done: bool = False,
        attempt: int | None = None,
    ) -> StoreReport:
        """Record one result of ``run``; see the module ``fewshot.ledger.results`` for the rules.

        ``done=True`` also marks the run done, in the same transaction (for the last result a
        trainer reports): without it a run whose results are all in still counts as not done.
        """
        line = check_line(
            run,
            metric,
            value,
            step=step,
            values=None if values is None else list(values),
            subset_digest=subset_digest,
            budget=budget,
        )
        return self.record_lines([line], replace=replace, done=done, attempt=attempt)

    def record_lines(
        self,
        lines: Sequence[ResultLine],
        *,
        replace: bool = False,
        source: str = "api",
        done: bool = False,
        attempt: int | None = None,
    ) -> StoreReport:
        """Record several checked results at once: all of them or none. ``done=True`` also marks
        their runs done, in the same transaction; ``attempt``: see
        :func:`fewshot.ledger.results.store_results` (a stale attempt marks nothing done)."""

        def go(c: Connection) -> StoreReport:
            sid, name = self._sid(c)
            report = store_results(
                c, sid, name, lines, replace=replace, source=source, attempt=attempt
            )
            if done:
                for key in dict.fromkeys(ln.run for ln in lines):
                    finish_run(c, find_run(c, sid, key, name), "done", None, attempt=attempt)
            return report

        return self._tx(go)

    def ingest(self, paths: Iterable[str | Path], *, replace: bool = False) -> list[IngestReport]:
        """Ingest JSONL or CSV results files (or folders of them), one transaction a file.

        A file whose content was ingested before is skipped, so re-running an ingest after a
        crash never doubles a result.
        """
        return [self.ingest_file(p, replace=replace) for p in expand_result_paths(paths)]

    def ingest_file(
        self,
        path: str | Path,
        *,
        replace: bool = False,
        run: str | None = None,
        attempt: int | None = None,
    ) -> IngestReport:
        """Ingest one results file: all of it or none of it.

        A file whose content was ingested before is skipped before it is parsed. With ``run``,
        every line must belong to that run (what ``exec`` asks of the file of the run it ran).
        """
        p = Path(path)
        try:
            data = p.read_bytes()
        except OSError as exc:
            raise ResultFileError(f"{p}: cannot read the results file ({exc.strerror}).") from None
        digest = file_digest_bytes(data)

        def seen_rows(c: Connection) -> int | None:
            sid, _ = self._sid(c)
            return c.execute(
                select(IngestedFileRow.rows).where(
                    IngestedFileRow.study_id == sid, IngestedFileRow.digest == digest
                )
            ).scalar()

        known = self._tx(seen_rows)
        if known is not None:
            return IngestReport(str(p), int(known), True)
        lines = parse_result_file(p, data)
        if run is not None:
            for ln in lines:
                if ln.run != run:
                    raise ResultFileError(
                        f"{ln.where}: a result of run {ln.run!r}, but this file belongs to run "
                        f"{run!r}. A run's results file holds only that run's results; write "
                        "other runs' results to their own files."
                    )

        def go(c: Connection) -> IngestReport:
            sid, name = self._sid(c)
            seen = c.execute(
                select(IngestedFileRow.id).where(
                    IngestedFileRow.study_id == sid, IngestedFileRow.digest == digest
                )
            ).scalar()
            if seen is not None:
                return IngestReport(str(p), len(lines), True)
            rep = store_results(
                c,
                sid,
                name,
                lines,
                replace=replace,
                source=f"file:{digest[:16]}",
                attempt=attempt,
            )
            if rep.ignored:
                # an older attempt's lines were left out: the same content from the current
                # attempt must not be skipped as "ingested before"
                return IngestReport(
                    str(p), len(lines), False, rep.stored, rep.unchanged, rep.replaced, rep.ignored
                )
            c.execute(
                insert(IngestedFileRow).values(
                    study_id=sid,
                    digest=digest,
                    path=str(p),
                    rows=len(lines),
                    ingested_at=time.time(),
                )
            )
            return IngestReport(
                str(p), len(lines), False, rep.stored, rep.unchanged, rep.replaced, rep.ignored
            )

        return self._tx(go)

    # ------------------------------------------------------------------ reading

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
                columns=[
                    "key",
                    "arm",
                    "role",
                    "task",
                    "size",
                    "seed",
                    "replicate",
                    "status",
                    "worker",
                    "lease_expires",
                    "attempts",
                    "message",
                    "subset_file",
                    "subset_digest",
                ],
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
            return {
                "name": r.name,
                "metric": r.metric,
                "higher_is_better": r.higher_is_better,
                "replicates": r.replicates,
                "baseline": r.baseline,
            }

        return self._tx(go)


MAX_LEASE = 30 * 86400.0
MIN_LEASE = 30.0
# Tests (only) may shorten the lease floor through this variable; see DEVELOPERS.md.
TESTING_MIN_LEASE = "FEWSHOT_TESTING_MIN_LEASE"


def min_lease() -> float:
    """The shortest lease a claim may have: 30 s, less only under ``FEWSHOT_TESTING_MIN_LEASE``."""
    raw = os.environ.get(TESTING_MIN_LEASE)
    if raw:
        try:
            value = float(raw)
        except ValueError:
            value = MIN_LEASE
        if math.isfinite(value) and value > 0:
            return min(value, MIN_LEASE)
    return MIN_LEASE


def _check_lease(lease: float) -> None:
    ok = isinstance(lease, int | float) and not isinstance(lease, bool)
    floor = min_lease()
    if not ok or not math.isfinite(lease) or not floor <= lease <= MAX_LEASE:
        raise FewshotError(
            f"lease must be a finite number of seconds from {floor:g} to 30 days "
            f"({MAX_LEASE:.0f}); a shorter lease would run out while a busy machine renews it. "
            f"Got {lease!r}."
        )


def _check_worker(worker: str) -> None:
    if not isinstance(worker, str) or not worker.strip() or len(worker) > 200 or "\x00" in worker:
        raise FewshotError(
            "worker must be a non-empty name of at most 200 characters, e.g. the host name."
        )


def expand_result_paths(paths: Iterable[str | Path]) -> list[Path]:
    """Files as given, and every .jsonl/.csv file below each folder (sorted)."""
    out: list[Path] = []
    for raw in paths:
        p = Path(raw)
        if p.is_dir():
            found = sorted(
                q for q in p.rglob("*") if q.is_file() and q.suffix.lower() in (".jsonl", ".csv")
            )
            out.extend(found)
        elif p.exists():
            out.append(p)
        else:
            raise ResultFileError(f"{p}: no such results file or folder. Check the path.")
    return out
