"""Completion of a study: runs per arm and size by status, expired leases, failures."""

from __future__ import annotations

import time
from dataclasses import dataclass

import pandas as pd

__all__ = ["StatusReport", "STATUSES", "summarise"]

STATUSES = ("done", "running", "failed", "planned")


@dataclass(frozen=True)
class StatusReport:
    """A study's completion.

    Attributes
    ----------
    study : str
    ledger : str
        The ledger's URL, password masked.
    cells : pandas.DataFrame
        One row per (arm, size): columns arm, size, done, running, failed, planned, total.
    totals : dict of str to int
        Runs per status and ``total``.
    expired : pandas.DataFrame
        Running runs whose lease has expired: key, worker, attempts, lease_expired_s_ago.
    failed : pandas.DataFrame
        Failed runs: key, attempts, message.
    """

    study: str
    ledger: str
    cells: pd.DataFrame
    totals: dict[str, int]
    expired: pd.DataFrame
    failed: pd.DataFrame


def summarise(
    study: str, ledger: str, runs: pd.DataFrame, now: float | None = None
) -> StatusReport:
    """Build a :class:`StatusReport` from :meth:`Ledger.runs`' table."""
    now = time.time() if now is None else now
    counts = (
        runs.groupby(["arm", "size", "status"], sort=False).size().unstack("status", fill_value=0)
        if len(runs)
        else pd.DataFrame(columns=list(STATUSES))
    )
    for s in STATUSES:
        if s not in counts.columns:
            counts[s] = 0
    cells = (
        counts[list(STATUSES)].reset_index()
        if len(runs)
        else pd.DataFrame(columns=["arm", "size", *STATUSES])
    )
    cells["total"] = cells[list(STATUSES)].sum(axis=1)
    order = {a: i for i, a in enumerate(dict.fromkeys(runs["arm"]))}
    cells = cells.sort_values(
        ["arm", "size"], key=lambda col: col.map(order) if col.name == "arm" else col
    )
    cells = cells.reset_index(drop=True).astype({s: int for s in (*STATUSES, "total")})
    totals = {s: int((runs["status"] == s).sum()) for s in STATUSES}
    totals["total"] = len(runs)
    running = runs[(runs["status"] == "running") & (runs["lease_expires"].fillna(now) < now)]
    expired = pd.DataFrame(
        {
            "key": running["key"],
            "worker": running["worker"],
            "attempts": running["attempts"],
            "lease_expired_s_ago": (now - running["lease_expires"]).round(0),
        }
    ).reset_index(drop=True)
    failed = runs.loc[runs["status"] == "failed", ["key", "attempts", "message"]].reset_index(
        drop=True
    )
    return StatusReport(study, ledger, cells, totals, expired, failed)
