"""Completion of a study: runs per arm and size by status, expired leases, failures."""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import pandas as pd

__all__ = ["StatusReport", "STATUSES", "UNMARKED", "summarise"]

STATUSES = ("done", "running", "failed", "planned")
UNMARKED = "has_results"  # not a stored status: planned or running, yet its final result is in


@dataclass(frozen=True)
class StatusReport:
    """A study's completion.

    Attributes
    ----------
    study : str
    ledger : str
        The ledger's URL, password masked.
    cells : pandas.DataFrame
        One row per (arm, size): columns arm, size, done, running, failed, planned, has_results,
        total. ``has_results`` counts runs not marked done whose final result of the study's
        metric is recorded ("has results, not marked done"); they are not counted as planned or
        running.
    totals : dict of str to int
        Runs per status, ``has_results`` and ``total``.
    expired : pandas.DataFrame
        Running runs whose lease has expired: key, worker, attempts, lease_expired_s_ago.
    failed : pandas.DataFrame
        Failed runs: key, attempts, message.
    unmarked : pandas.DataFrame
        Runs with results, not marked done: key, status.
    attempts : pandas.DataFrame
        Runs that needed more than one attempt or were retried: key, status, attempts, retries.
    voided : int
        Results voided (kept, left out of every statistic).
    forced : int
        Live results stored by hand on a run that no attempt held.
    from_step : int
        Final results taken from a run's last reported step when it was marked done.
    """

    study: str
    ledger: str
    cells: pd.DataFrame
    totals: dict[str, int]
    expired: pd.DataFrame
    failed: pd.DataFrame
    unmarked: pd.DataFrame
    attempts: pd.DataFrame = field(default_factory=pd.DataFrame)
    voided: int = 0
    forced: int = 0
    from_step: int = 0

    def attempts_line(self) -> str | None:
        """ "3 runs needed more than one attempt (max 3); 2 were retried", or None."""
        a = self.attempts
        if a.empty:
            return None
        many = a[a["attempts"] > 1]
        parts = []
        if len(many):
            parts.append(
                f"{len(many)} run(s) needed more than one attempt (max {int(many['attempts'].max())})"
            )
        retried = a[a["retries"] > 0]
        if len(retried):
            parts.append(
                f"{len(retried)} run(s) were retried, taking {int(retried['attempts'].sum())} "
                f"attempts in all (max {int(retried['attempts'].max())})"
            )
        return "; ".join(parts) or None


def summarise(
    study: str,
    ledger: str,
    runs: pd.DataFrame,
    now: float | None = None,
    *,
    with_results: set[str] | frozenset[str] = frozenset(),
) -> StatusReport:
    """Build a :class:`StatusReport` from :meth:`Ledger.runs`' table.

    ``with_results`` holds the keys of runs whose final result is recorded; those that are not
    done or failed are counted as "has results, not marked done".
    """
    now = time.time() if now is None else now
    kinds = (*STATUSES, UNMARKED)
    unmarked_mask = runs["key"].isin(with_results) & runs["status"].isin(["planned", "running"])
    shown = runs.assign(status=runs["status"].where(~unmarked_mask, UNMARKED))
    counts = (
        shown.groupby(["arm", "size", "status"], sort=False).size().unstack("status", fill_value=0)
        if len(runs)
        else pd.DataFrame(columns=list(kinds))
    )
    for s in kinds:
        if s not in counts.columns:
            counts[s] = 0
    cells = (
        counts[list(kinds)].reset_index()
        if len(runs)
        else pd.DataFrame(columns=["arm", "size", *kinds])
    )
    cells["total"] = cells[list(kinds)].sum(axis=1)
    order = {a: i for i, a in enumerate(dict.fromkeys(runs["arm"]))}
    cells = cells.sort_values(
        ["arm", "size"], key=lambda col: col.map(order) if col.name == "arm" else col
    )
    cells = cells.reset_index(drop=True).astype({s: int for s in (*kinds, "total")})
    totals = {s: int((shown["status"] == s).sum()) for s in kinds}
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
    unmarked = runs.loc[unmarked_mask, ["key", "status"]].reset_index(drop=True)
    again = (
        (runs["attempts"] > 1) | (runs["retries"] > 0)
        if "retries" in runs
        else runs["attempts"] > 1
    )
    cols = [c for c in ("key", "status", "attempts", "retries") if c in runs]
    attempts = runs.loc[again, cols].reset_index(drop=True)
    if "retries" not in attempts:
        attempts["retries"] = 0
    return StatusReport(study, ledger, cells, totals, expired, failed, unmarked, attempts)
