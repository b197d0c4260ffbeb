"""The ledger's write side: planning, claims and leases, results recorded and ingested."""

from __future__ import annotations

import errno
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy import Connection, insert, select

from fewshot.errors import InvalidInput
from fewshot.ledger import draws_undo
from fewshot.ledger.connection import LedgerConnection
from fewshot.ledger.engine import LedgerError
from fewshot.ledger.models import IngestedFileRow
from fewshot.ledger.planning import PlanReport, plan_study
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
    check_lease,
    check_worker,
    claim_run,
    extend_lease,
    find_run,
    finish_run,
    release_run,
    settle_run,
)
from fewshot.results_format import attempt_of_file
from fewshot.study import Study, draw_study

__all__ = ["IngestReport", "LedgerWrites", "expand_result_paths"]


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


class LedgerWrites(LedgerConnection):
    """The methods of :class:`fewshot.ledger.Ledger` that write."""

    # ------------------------------------------------------------------ planning

    def plan(self, study: Study) -> PlanReport:
        """Draw every task's subsets and plan every run of ``study`` not yet planned."""
        draws = draw_study(study)
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
        check_worker(worker)
        check_lease(lease)

        def go(c: Connection) -> Claim | None:
            sid, _ = self._sid(c)
            return claim_run(c, sid, worker, lease, skip_locked=self._skip_locked)

        return self._tx(go)

    def heartbeat(
        self, run: str, worker: str, lease: float = 7200.0, *, attempt: int | None = None
    ) -> bool:
        """Extend ``worker``'s lease on ``run``; False when the worker (and ``attempt``, when
        given) no longer holds it."""
        check_lease(lease)

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

    def fail(
        self, run: str, message: str, *, attempt: int | None = None, unclaimed: bool = False
    ) -> None:
        """Mark ``run`` failed, keeping the (tail of the) message; ``attempt`` as for :meth:`done`.

        A run no worker ever claimed is refused (there is no attempt that could have failed),
        unless ``unclaimed`` says the caller ran it outside the claims (a pinned scheduler job)."""
        self._finish(run, "failed", message, attempt, unclaimed=unclaimed)

    def _finish(
        self,
        run: str,
        status: str,
        message: str | None,
        attempt: int | None,
        *,
        unclaimed: bool = True,
    ) -> None:
        def go(c: Connection) -> None:
            sid, name = self._sid(c)
            row = find_run(c, sid, run, name)
            if not unclaimed and row.status == "planned" and not row.attempts:
                raise InvalidInput(
                    f"run '{run}' was never claimed (it is planned, with no attempt), so it has "
                    "not failed. Leave it planned for a worker, or, if it was run outside the "
                    "ledger's claims, mark it failed with `unclaimed`."
                )
            finish_run(c, row, status, message, attempt=attempt)

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

    def ingest(
        self,
        paths: Iterable[str | Path],
        *,
        replace: bool = False,
        progress: Callable[[int, int, IngestReport], None] | None = None,
    ) -> list[IngestReport]:
        """Ingest JSONL or CSV results files (or folders of them), one transaction a file.

        A file whose content was ingested before is skipped, so re-running an ingest after a
        crash never doubles a result. A work loop's results file names its attempt
        (``run.attempt2.jsonl``), and its results count only while that attempt is current.
        ``progress(done, total, report)`` is called after each file. A refused file raises;
        the files before it stay ingested (``progress`` has seen them).
        """
        files = expand_result_paths(paths)
        reports: list[IngestReport] = []
        for f in files:
            reports.append(self.ingest_file(f, replace=replace, attempt=attempt_of_file(f)))
            if progress is not None:
                progress(len(reports), len(files), reports[-1])
        return reports

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
