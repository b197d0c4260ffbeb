"""Handing runs to workers: atomic claims with leases, heartbeats, done and failed."""

from __future__ import annotations

import difflib
import time
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Connection, Row, and_, or_, select, update

from fewshot.errors import FewshotError
from fewshot.ledger.models import ArmRow, RunRow, SubsetRow, TaskRow

__all__ = [
    "Claim",
    "UnknownRun",
    "claim_run",
    "extend_lease",
    "finish_run",
    "find_run",
    "release_run",
]

MESSAGE_LIMIT = 4000


class UnknownRun(FewshotError, LookupError):
    """A run key that the selected study does not have."""


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
            "Pick its study with --study."
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
    q = (
        select(RunRow.id)
        .where(
            RunRow.study_id == sid,
            or_(
                RunRow.status == "planned",
                and_(RunRow.status == "running", RunRow.lease_expires < now),
            ),
        )
        .order_by(RunRow.id)
        .limit(1)
    )
    if skip_locked:
        q = q.with_for_update(skip_locked=True)
    rid = conn.execute(q).scalar()
    if rid is None:
        return None
    expires = now + lease
    conn.execute(
        update(RunRow)
        .where(RunRow.id == rid)
        .values(
            status="running",
            worker=worker,
            lease_expires=expires,
            attempts=RunRow.attempts + 1,
            started_at=now,
            message=None,
        )
    )
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


def extend_lease(conn: Connection, run: Row[Any], worker: str, lease: float) -> bool:
    """Push the lease of a running run forward; False when the worker no longer holds it."""
    if run.status != "running" or run.worker != worker:
        return False
    conn.execute(
        update(RunRow).where(RunRow.id == run.id).values(lease_expires=time.time() + lease)
    )
    return True


def finish_run(conn: Connection, run: Row[Any], status: str, message: str | None = None) -> None:
    """Mark a run ``done`` or ``failed`` (with the tail of a message) and drop its lease."""
    # NUL characters (a trainer's binary stderr) cannot be stored in PostgreSQL text: drop them.
    text = None if message is None else message.replace("\x00", "")[-MESSAGE_LIMIT:]
    conn.execute(
        update(RunRow)
        .where(RunRow.id == run.id)
        .values(status=status, lease_expires=None, finished_at=time.time(), message=text)
    )


def release_run(conn: Connection, run: Row[Any], worker: str) -> bool:
    """Hand a running run held by ``worker`` back to the plan (status planned, no lease)."""
    if run.status != "running" or run.worker != worker:
        return False
    conn.execute(
        update(RunRow)
        .where(RunRow.id == run.id)
        .values(status="planned", lease_expires=None, worker=None)
    )
    return True
