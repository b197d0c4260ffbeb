"""The ledger's write side: planning, claims and leases, results recorded (and ingested, through
:class:`~fewshot.ledger.ingest_side.LedgerIngest`)."""

from __future__ import annotations

import errno
import time
from collections.abc import Sequence

from sqlalchemy import Connection, select

from fewshot.errors import InvalidInput
from fewshot.ledger import draws_undo
from fewshot.ledger.engine import LedgerError
from fewshot.ledger.ingest_side import IngestReport, LedgerIngest, expand_result_paths
from fewshot.ledger.models import RunRow
from fewshot.ledger.planning import PlanReport, plan_study
from fewshot.ledger.results import (
    ResultLine,
    StoreReport,
    check_line,
    store_results,
)
from fewshot.ledger.runs import (
    Claim,
    check_lease,
    check_worker,
    claim_key,
    claim_run,
    claimable,
    extend_lease,
    find_run,
    finish_run,
    release_run,
    settle_run,
    take_run,
)
from fewshot.study import Study, draw_study

__all__ = ["IngestReport", "LedgerWrites", "expand_result_paths"]


class LedgerWrites(LedgerIngest):
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

    def claim(
        self,
        worker: str,
        lease: float = 7200.0,
        *,
        run: str | None = None,
        attempt: int | None = None,
        include_failed: bool = False,
    ) -> Claim | None:
        """Atomically claim one planned run (or one whose lease expired) for ``worker``; None
        when none is left.

        With ``run``, claim that run: a new attempt when it is planned (or its lease ran out),
        or, with ``attempt``, take over that attempt's claim (one that :meth:`claim_pending`
        made for a scheduler job); anything else is an error saying why. ``include_failed``
        lets a failed ``run`` be claimed anew too (a pinned job's exit record being recorded).
        """
        check_worker(worker)
        check_lease(lease)

        def go(c: Connection) -> Claim | None:
            sid, name = self._sid(c)
            if run is not None:
                row = find_run(c, sid, run, name)
                return claim_key(c, row, worker, lease, attempt, include_failed=include_failed)
            return claim_run(c, sid, worker, lease, skip_locked=self._skip_locked)

        return self._tx(go)

    def claim_pending(
        self, worker: str, lease: float = 7200.0, *, include_failed: bool = False
    ) -> list[Claim]:
        """Claim every claimable run at once (planned, lease run out, and failed with
        ``include_failed``), each as a new attempt with its lease: what ``jobs`` does, so that
        the runs it lists are never listed again while their lease holds."""
        check_worker(worker)
        check_lease(lease)
        statuses = ("planned", "failed") if include_failed else ("planned",)

        def go(c: Connection) -> list[Claim]:
            sid, _ = self._sid(c)
            now = time.time()
            q = select(RunRow.id).where(claimable(sid, now, statuses)).order_by(RunRow.id)
            if self._skip_locked:
                q = q.with_for_update(skip_locked=True)
            return [take_run(c, rid, worker, lease, now) for rid in c.execute(q).scalars().all()]

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
        attempt is the run's current one: else :class:`StaleAttempt` and nothing changes.

        A run is done only with a final result of the study's primary metric: without one the
        last reported step's result becomes the final one (the ledger records the step), and a
        run with neither is refused (:class:`~fewshot.ledger.finals.Incomplete`)."""
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
        final: bool = False,
        values: Sequence[float] | None = None,
        subset_digest: str | None = None,
        budget: dict[str, float] | None = None,
        replace: bool = False,
        done: bool = False,
        attempt: int | None = None,
        force: bool = False,
        new_metric: bool = False,
    ) -> StoreReport:
        """Record one result of ``run``: at a training ``step``, or its final evaluation
        (``final=True``); see the module ``fewshot.ledger.results`` for the rules.

        ``done=True`` also marks the run done, in the same transaction (for the last result a
        trainer reports): without it a run whose results are all in still counts as not done.
        ``attempt``: the claim's ``FEWSHOT_ATTEMPT``; without one, a run that is not running
        takes the result only with ``force`` (stored as forced). ``new_metric`` adds a metric
        the study does not declare.
        """
        line = check_line(
            run,
            metric,
            value,
            step=step,
            final=final,
            values=None if values is None else list(values),
            subset_digest=subset_digest,
            budget=budget,
        )
        return self.record_lines(
            [line],
            replace=replace,
            done=done,
            attempt=attempt,
            force=force,
            new_metric=new_metric,
        )

    def record_lines(
        self,
        lines: Sequence[ResultLine],
        *,
        replace: bool = False,
        source: str = "api",
        done: bool = False,
        attempt: int | None = None,
        force: bool = False,
        new_metric: bool = False,
    ) -> StoreReport:
        """Record several checked results at once: all of them or none. ``done=True`` also marks
        their runs done, in the same transaction; ``attempt``, ``force``, ``new_metric``: see
        :func:`fewshot.ledger.results.store_results` (a stale attempt marks nothing done)."""

        def go(c: Connection) -> StoreReport:
            sid, name = self._sid(c)
            report = store_results(
                c,
                sid,
                name,
                lines,
                replace=replace,
                source=source,
                attempt=attempt,
                force=force,
                new_metric=new_metric,
            )
            if done:
                for key in dict.fromkeys(ln.run for ln in lines):
                    finish_run(c, find_run(c, sid, key, name), "done", None, attempt=attempt)
            return report

        return self._tx(go)
