"""Handing runs to workers: atomic claims with leases, heartbeats, done and failed."""

from __future__ import annotations

import difflib
import math
import os
import time
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Connection, Row, and_, or_, select, update

from fewshot.errors import FewshotError
from fewshot.ledger.finals import Incomplete, ensure_final, primary_metric
from fewshot.ledger.models import ArmRow, RunRow, SubsetRow, TaskRow

__all__ = [
    "Claim",
    "StaleAttempt",
    "UnknownRun",
    "claim_key",
    "claim_run",
    "extend_lease",
    "finish_run",
    "find_run",
    "release_run",
    "settle_run",
]

MESSAGE_LIMIT = 4000


class UnknownRun(FewshotError, LookupError):
    """A run key that the selected study does not have."""


class StaleAttempt(FewshotError, RuntimeError):
    """A write from an attempt of a run that is no longer its current one (its lease ran out and
    the run was handed out again): its status change is refused."""

    def __init__(
        self, key: str, attempt: int, current: int, what: str, *, replanned: bool = False
    ) -> None:
        super().__init__(
            f"run {key!r}: attempt {attempt} no longer holds the run (it was put back to the "
            f"plan, by `void` or `retry`), so its {what} was not recorded."
            if replanned
            else f"run {key!r}: attempt {attempt} is no longer the run's current one (attempt "
            f"{current} took it over after attempt {attempt}'s lease ran out), so its {what} was "
            "not recorded. Results of the older attempt are kept only where they agree with what "
            "is stored."
        )
        self.key = key
        self.attempt = attempt
        self.current = current


def check_attempt(run: Row[Any], attempt: int | None, what: str) -> bool:
    """True when ``attempt`` is the run's current one (or None: a write by hand), False when it is
    an older one; an attempt the run never had is an error."""
    if attempt is None or attempt == run.attempts:
        return True
    if isinstance(attempt, bool) or not isinstance(attempt, int) or not 1 <= attempt:
        raise FewshotError(f"attempt must be a whole number of 1 or more. Got {attempt!r}.")
    if attempt > run.attempts:
        raise FewshotError(
            f"run {run.key!r} was handed out {run.attempts} time(s), so it has no attempt "
            f"{attempt}. Use the FEWSHOT_ATTEMPT the work loop gave the trainer."
        )
    return False


def lock_run(conn: Connection, run: Row[Any]) -> Row[Any]:
    """The run's row again, locked until the transaction ends (PostgreSQL; SQLite transactions
    already hold the write lock), so that a claim cannot change its attempt meanwhile."""
    q = select(RunRow).where(RunRow.id == run.id)
    if conn.dialect.name == "postgresql":
        q = q.with_for_update()
    return conn.execute(q).one()


@dataclass(frozen=True)
class Claim:
    """A run handed to a worker.

    Attributes
    ----------
    key, arm, task : str
    size, seed, replicate : int
    subset_file : str
        The id file of the run's subset (one id a line).
    subset_digest : str
    attempt : int
        1 for the first claim; more when a lease expired and the run was handed out again.
    lease_expires : float
        Seconds since the epoch.
    worker : str
    """

    key: str
    arm: str
    task: str
    size: int
    seed: int
    replicate: int
    subset_file: str
    subset_digest: str
    attempt: int
    lease_expires: float
    worker: str


def find_run(conn: Connection, sid: int, key: str, study_name: str) -> Row[Any]:
    """The run row of ``key`` in study ``sid``; an unknown key suggests the nearest one."""
    if "\x00" in key:
        raise UnknownRun(
            f"study {study_name!r} has no run {key!r}: run keys hold no NUL characters."
        )
    row = conn.execute(select(RunRow).where(RunRow.study_id == sid, RunRow.key == key)).first()
    if row is not None:
        return row
    other = conn.execute(select(RunRow.study_id).where(RunRow.key == key).limit(1)).scalar()
    if other is not None:
        raise UnknownRun(
            f"run {key!r} belongs to another study in this ledger, not to {study_name!r}. "
            "Pick its study with `study`."
        )
    keys = list(conn.execute(select(RunRow.key).where(RunRow.study_id == sid)).scalars())
    near = difflib.get_close_matches(key, keys, n=1, cutoff=0.6)
    hint = f" Did you mean {near[0]!r}?" if near else " List runs with `fewshot status`."
    raise UnknownRun(f"study {study_name!r} has no run {key!r}.{hint}")


def claim_run(
    conn: Connection, sid: int, worker: str, lease: float, *, skip_locked: bool
) -> Claim | None:
    """Claim one planned run, or one whose lease expired; None when nothing is claimable.

    Atomic: on SQLite the caller's transaction began with ``BEGIN IMMEDIATE``; on
    PostgreSQL the row is locked with ``FOR UPDATE SKIP LOCKED``.
    """
    now = time.time()
    q = select(RunRow.id).where(claimable(sid, now)).order_by(RunRow.id).limit(1)
    if skip_locked:
        q = q.with_for_update(skip_locked=True)
    rid = conn.execute(q).scalar()
    if rid is None:
        return None
    return take_run(conn, rid, worker, lease, now)


def take_run(
    conn: Connection, rid: int, worker: str, lease: float, now: float, *, new_attempt: bool = True
) -> Claim:
    """Give run ``rid`` to ``worker`` as a new attempt, with a lease (caller's transaction); with
    ``new_attempt=False`` the worker takes over the run's current attempt (a claim that
    ``jobs`` made for a scheduler job)."""
    expires = now + lease
    values: dict[str, Any] = {"status": "running", "worker": worker, "lease_expires": expires}
    if new_attempt:
        values.update(attempts=RunRow.attempts + 1, started_at=now, message=None)
    conn.execute(update(RunRow).where(RunRow.id == rid).values(**values))
    r = conn.execute(
        select(
            RunRow.key,
            RunRow.size,
            RunRow.seed,
            RunRow.replicate,
            RunRow.attempts,
            ArmRow.name.label("arm"),
            TaskRow.name.label("task"),
            SubsetRow.ids_path,
            SubsetRow.digest,
        )
        .join(ArmRow, ArmRow.id == RunRow.arm_id)
        .join(TaskRow, TaskRow.id == RunRow.task_id)
        .join(SubsetRow, SubsetRow.id == RunRow.subset_id)
        .where(RunRow.id == rid)
    ).one()
    return Claim(
        key=r.key,
        arm=r.arm,
        task=r.task,
        size=r.size,
        seed=r.seed,
        replicate=r.replicate,
        subset_file=r.ids_path,
        subset_digest=r.digest,
        attempt=r.attempts,
        lease_expires=expires,
        worker=worker,
    )


def claimable(sid: int, now: float, statuses: tuple[str, ...] = ("planned",)) -> Any:
    """The condition of the runs of study ``sid`` a worker may claim: ``statuses`` (planned),
    and running runs whose lease ran out."""
    return and_(
        RunRow.study_id == sid,
        or_(
            RunRow.status.in_(statuses),
            and_(RunRow.status == "running", RunRow.lease_expires < now),
        ),
    )


def claim_key(
    conn: Connection,
    run: Row[Any],
    worker: str,
    lease: float,
    attempt: int | None,
    *,
    include_failed: bool = False,
) -> Claim:
    """Claim the run ``run`` itself for ``worker``.

    Without ``attempt`` the run must be claimable (planned, or its lease ran out; or failed, with
    ``include_failed``) and is taken as a new attempt. With ``attempt`` the worker takes over that attempt's claim (made by ``jobs``
    for a scheduler job): the run must be running under that attempt.
    """
    run = lock_run(conn, run)
    now = time.time()
    expired = run.status == "running" and (run.lease_expires or 0) < now
    again = run.status == "planned" or (include_failed and run.status == "failed")
    if attempt is None and (again or expired):
        return take_run(conn, run.id, worker, lease, now)
    if attempt is not None and run.status == "running" and attempt == run.attempts:
        return take_run(conn, run.id, worker, lease, now, new_attempt=False)
    if attempt is not None and run.status == "running" and 1 <= attempt < run.attempts:
        raise StaleAttempt(run.key, attempt, run.attempts, "claim")
    held = f"attempt {run.attempts} of worker {run.worker!r} holds it"
    why = {
        "running": f"{held}; give that attempt (FEWSHOT_ATTEMPT) to take over its claim, or "
        "wait for its lease to run out",
        "done": "it is done; `void` its result or `retry` it to run it again",
        "failed": "it failed; put it back to the plan with `retry` first",
        "planned": "it is planned, with no claim; give no attempt to claim it as a new one",
    }[str(run.status)]
    asked = "" if attempt is None else f" for attempt {attempt}"
    raise FewshotError(f"run {run.key!r} cannot be claimed{asked}: {why}.")


def extend_lease(
    conn: Connection, run: Row[Any], worker: str, lease: float, attempt: int | None = None
) -> bool:
    """Push the lease of a running run forward; False when the worker (and ``attempt``, when
    given) no longer holds it."""
    if run.status != "running" or run.worker != worker:
        return False
    if attempt is not None and attempt != run.attempts:
        return False
    conn.execute(
        update(RunRow).where(RunRow.id == run.id).values(lease_expires=time.time() + lease)
    )
    return True


def finish_run(
    conn: Connection,
    run: Row[Any],
    status: str,
    message: str | None = None,
    *,
    attempt: int | None = None,
) -> None:
    """Mark a run ``done`` or ``failed`` (with the tail of a message) and drop its lease.

    With ``attempt``, only the run's current attempt may do so: an older one raises
    :class:`StaleAttempt` and changes nothing. ``done`` needs the final result of the study's
    primary metric (taken from the last reported step when none is marked final): without it
    :class:`~fewshot.ledger.finals.Incomplete` is raised and nothing changes.
    """
    run = lock_run(conn, run) if attempt is not None else run
    if not check_attempt(run, attempt, f"'{status}'"):
        raise StaleAttempt(run.key, int(attempt), run.attempts, f"'{status}'")  # type: ignore[arg-type]
    if attempt is not None and run.status == "planned":
        raise StaleAttempt(run.key, attempt, run.attempts, f"'{status}'", replanned=True)
    if status == "done" and not ensure_final(conn, run):
        raise Incomplete(run.key, primary_metric(conn, run.study_id))
    # NUL characters (a trainer's binary stderr) cannot be stored in PostgreSQL text: drop them.
    text = None if message is None else message.replace("\x00", "")[-MESSAGE_LIMIT:]
    conn.execute(
        update(RunRow)
        .where(RunRow.id == run.id)
        .values(status=status, lease_expires=None, finished_at=time.time(), message=text)
    )


def release_run(conn: Connection, run: Row[Any], worker: str, attempt: int | None = None) -> bool:
    """Hand a running run held by ``worker`` (and ``attempt``, when given) back to the plan
    (status planned, no lease)."""
    run = lock_run(conn, run)
    if run.status != "running" or run.worker != worker:
        return False
    if attempt is not None and attempt != run.attempts:
        return False
    conn.execute(
        update(RunRow)
        .where(RunRow.id == run.id)
        .values(status="planned", lease_expires=None, worker=None)
    )
    return True


def settle_run(
    conn: Connection, run: Row[Any], attempt: int, status: str, message: str | None
) -> str:
    """What the work loop does when a trainer ends: mark the run ``status`` when ``attempt`` is
    still current and the run still running (``done`` without a final result of the study's
    metric marks it failed, saying so). Returns the status the run is left in, or
    ``superseded`` when a newer attempt holds the run (nothing is changed then)."""
    run = lock_run(conn, run)
    if not check_attempt(run, attempt, f"'{status}'"):
        return "superseded"
    if run.status != "running":  # the trainer marked the run itself (or it was handed back)
        return str(run.status)
    if status == "done" and not ensure_final(conn, run):
        # ``message`` of a done run, if any, names where it ran (a pinned job), kept in the reason
        where = "" if message is None else f" {message}"
        status = "failed"
        message = (
            f"trainer exited 0 but reported no final {primary_metric(conn, run.study_id)}{where}"
        )
    finish_run(conn, run, status, None if status == "done" else message)
    return status


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


def check_lease(lease: float) -> None:
    ok = isinstance(lease, int | float) and not isinstance(lease, bool)
    floor = min_lease()
    if not ok or not math.isfinite(lease) or not floor <= lease <= MAX_LEASE:
        raise FewshotError(
            f"lease must be a finite number of seconds from {floor:g} to 30 days "
            f"({MAX_LEASE:.0f}); a shorter lease would run out while a busy machine renews it. "
            f"Got {lease!r}."
        )


def check_worker(worker: str) -> None:
    if not isinstance(worker, str) or not worker.strip() or len(worker) > 200 or "\x00" in worker:
        raise FewshotError(
            "worker must be a non-empty name of at most 200 characters, e.g. the host name."
        )
