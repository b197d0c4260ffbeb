"""Aggregates over tasks: IQM, mean, median and optimality gap of normalised scores.

Scores of all runs of all tasks (at one arm and size) are pooled, as in Agarwal et
al. (2021, "Deep RL at the edge of the statistical precipice"). Intervals come from a
stratified bootstrap: seeds are resampled within each task, with one index matrix
per task shared by every arm and size (whole curves, paired arms), and the
percentile interval of the resampled aggregate.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from fewshot.errors import InvalidInput
from fewshot.stats.curves import CurveSettings
from fewshot.stats.estimators import AGGREGATES
from fewshot.stats.resample import nan_estimate

__all__ = ["AGGREGATE_COLUMNS", "aggregate_curves"]

AGGREGATE_COLUMNS = [
    "arm",
    "role",
    "group",
    "size",
    "aggregate",
    "estimate",
    "low",
    "high",
    "confidence",
    "method",
    "n_tasks",
    "n_seeds",
    "n_runs",
    "note",
]


def aggregate_curves(
    scores: pd.DataFrame,
    settings: CurveSettings | None = None,
    *,
    value: str = "normalised",
    by_group: bool = False,
    aggregates: tuple[str, ...] = ("iqm", "mean", "median", "optimality_gap"),
) -> pd.DataFrame:
    """Aggregate curves per arm and size (and task group with ``by_group``).

    Returns
    -------
    DataFrame
        Columns: arm, role, group (None across all tasks), size, aggregate, estimate, low, high,
        confidence, method, n_tasks, n_seeds (fewest seeds of any task in the cell), n_runs, note.
    """
    settings = (settings or CurveSettings()).check()
    for a in aggregates:
        if a not in AGGREGATES:
            raise InvalidInput(f"aggregate must be one of {', '.join(AGGREGATES)}. Got {a!r}.")
    data = scores.dropna(subset=[value])
    if data.empty:
        return pd.DataFrame(columns=AGGREGATE_COLUMNS)
    # seed-level values: replicates of a seed are averaged (the seed is the unit resampled)
    seed_level = data.groupby(["arm", "role", "group", "task", "size", "seed"], dropna=False)[
        value
    ].mean()
    seed_level = seed_level.reset_index()
    tasks = sorted(seed_level["task"].unique())
    root = np.random.SeedSequence(settings.seed)
    n_by_task = seed_level.groupby("task")["seed"].nunique().to_dict()
    # one index matrix per task, over that task's seeds, shared by every cell
    indices = {
        t: np.random.default_rng(child).integers(
            0, n_by_task[t], size=(settings.resamples, n_by_task[t])
        )
        for t, child in zip(tasks, root.spawn(len(tasks)), strict=True)
    }
    seed_pos = {
        t: {s: k for k, s in enumerate(sorted(g["seed"].unique()))}
        for t, g in seed_level.groupby("task")
    }
    keys = ["arm", "role", "size"] + (["group"] if by_group else [])
    alpha = 1 - settings.confidence
    rows = []
    for key, cell in seed_level.groupby(keys, sort=True, dropna=False):
        parts, n_seeds, notes = [], [], []
        for t, g in cell.groupby("task"):
            full = np.full(n_by_task[t], np.nan)
            for s, v in zip(g["seed"], g[value], strict=True):
                full[seed_pos[t][s]] = v
            if np.isnan(full).any():
                notes.append(f"{t}: {int(np.isnan(full).sum())} seed(s) missing")
            parts.append((t, full))
            n_seeds.append(int((~np.isnan(full)).sum()))
        pooled_b = np.concatenate(
            [full[indices[t]] for t, full in parts], axis=1
        )  # resamples × runs
        pooled = np.concatenate([full for _, full in parts])
        for name in aggregates:
            est = float(nan_estimate(name, pooled[None, :])[0])
            theta = nan_estimate(name, pooled_b)
            lo, hi = (
                np.nanquantile(theta, [alpha / 2, 1 - alpha / 2])
                if min(n_seeds) >= 2
                else (np.nan, np.nan)
            )
            row = dict(zip(keys, key, strict=True))
            rows.append(
                {
                    "arm": row["arm"],
                    "role": row["role"],
                    "group": row.get("group"),
                    "size": int(row["size"]),
                    "aggregate": name,
                    "estimate": est,
                    "low": float(lo),
                    "high": float(hi),
                    "confidence": settings.confidence,
                    "method": "stratified percentile",
                    "n_tasks": len(parts),
                    "n_seeds": min(n_seeds),
                    "n_runs": int((~np.isnan(pooled)).sum()),
                    "note": "; ".join(notes + (["under 3 seeds"] if min(n_seeds) < 3 else [])),
                }
            )
    return pd.DataFrame(rows, columns=AGGREGATE_COLUMNS)
