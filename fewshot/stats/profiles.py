"""Performance profiles and the scaling view.

A performance profile (Agarwal et al. 2021, section 4) gives, for each threshold τ, the
fraction of runs whose normalised score exceeds τ (``over="runs"``), or the fraction of
tasks whose estimate does (``over="tasks"``). Fractions of runs get an interval from the
stratified whole-curve resample. Fractions of tasks get none (:data:`NO_TASK_INTERVAL` says
why): the truth is a count over the study's few fixed tasks, with one more possible value than
there are tasks, and in simulation (``tests/benchmarks/coverage.py --printed``) a resampled
interval of it held the truth 98.6-99.9% of the time at 3-10 seeds, 64-78% of them a single
value, so its nominal 95% meant nothing; each task's uncertainty is in its episodes to the
threshold. The scaling view sets each arm's score at each size beside a
numeric attribute of the arm (e.g. its parameter count).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from fewshot.errors import InvalidInput
from fewshot.schema import ARM_COLUMNS
from fewshot.stats.curves import CurveSettings
from fewshot.stats.progress import advance
from fewshot.stats.resample import CurveResampler, interval

__all__ = ["NO_TASK_INTERVAL", "performance_profile", "scaling_view"]

NO_TASK_INTERVAL = (
    "no interval on the fraction of tasks above the threshold: it counts a few fixed tasks, and "
    "no interval of such a count measured near its nominal coverage in simulation (a resampled "
    "one held the truth 98.6-99.9% of the time); each task's episodes to the threshold carry its "
    "uncertainty"
)


def performance_profile(
    scores: pd.DataFrame,
    settings: CurveSettings,
    *,
    taus: np.ndarray | None = None,
    over: str = "runs",
    value: str = "normalised",
) -> pd.DataFrame:
    """Fraction above each τ per (arm, size). Columns: arm, size, tau, fraction, low, high, over,
    n_tasks, n_seeds, note (over tasks: low and high are NaN, the note says why)."""
    if over not in ("runs", "tasks"):
        raise InvalidInput(f"a profile is over 'runs' or 'tasks'. Got {over!r}.")
    settings.check()
    taus = np.linspace(0, 1.5, 31) if taus is None else np.asarray(taus, dtype=float)
    rs = CurveResampler(scores, value, settings)
    arms = list(dict.fromkeys(scores["arm"]))
    rows = []
    draw_counts: dict[tuple[str, ...], np.ndarray] = {}
    for k, arm in enumerate(arms):
        advance("performance profiles", k, len(arms))
        tasks = [t for t in rs.seeds if rs.has(arm, t)]
        sizes = sorted(set().union(*[set(rs.sizes(arm, t)) for t in tasks])) if tasks else []
        for size in sizes:
            present = [t for t in tasks if size in rs.sizes(arm, t)]
            sz = np.array([size])
            n = min(rs.n_seeds(arm, t, sz) for t in present)
            if over == "tasks":  # no resamples: a fraction of tasks gets no interval
                point = np.array([rs.point(arm, t, sz)[0] for t in present])  # tasks
                frac = (point[None, :] > taus[:, None]).mean(axis=1)
                frac_b = np.full((1, len(taus)), np.nan)
            else:
                mats = [rs.matrix(arm, t, sz)[0] for t in present]
                pooled = np.concatenate(mats)
                pooled = pooled[np.isfinite(pooled)]
                frac = (pooled[None, :] > taus[:, None]).mean(axis=1)
                # a resample's count above τ is Σ (times seed j was drawn) × [x_j > τ]: a product
                # of the draw counts (resamples × runs, once per set of tasks) and the runs' marks
                key = tuple(present)
                if key not in draw_counts:
                    draw_counts[key] = np.concatenate([_drawn(rs.index[t]) for t in present], 1)
                drawn = draw_counts[key]
                finite = np.isfinite(np.concatenate(mats))
                with np.errstate(invalid="ignore"):
                    marks = (np.concatenate(mats)[:, None] > taus[None, :]) & finite[:, None]
                counted = np.rint(drawn @ marks.astype(float)).astype(np.int64)
                n_valid = np.rint(drawn @ finite.astype(float)).astype(np.int64)
                with np.errstate(invalid="ignore", divide="ignore"):
                    frac_b = counted / n_valid[:, None]
            for j, tau in enumerate(taus):
                if over == "tasks":  # no interval (see NO_TASK_INTERVAL)
                    lo, hi = float("nan"), float("nan")
                else:
                    lo, hi = interval(frac_b[:, j], settings.confidence, n)
                rows.append(
                    {
                        "arm": arm,
                        "size": int(size),
                        "tau": float(tau),
                        "fraction": float(frac[j]),
                        "low": lo,
                        "high": hi,
                        "over": over,
                        "n_tasks": len(present),
                        "n_seeds": n,
                        "note": NO_TASK_INTERVAL if over == "tasks" else "",
                    }
                )
    advance("performance profiles", len(arms), len(arms))
    return pd.DataFrame(
        rows,
        columns=[
            "arm",
            "size",
            "tau",
            "fraction",
            "low",
            "high",
            "over",
            "n_tasks",
            "n_seeds",
            "note",
        ],
    )


def _drawn(index: np.ndarray) -> np.ndarray:
    """Resamples × seeds: how many times each seed is drawn by each row of a seed index matrix
    (as floats, for an exact product with 0/1 marks: counts stay far below 2^53)."""
    n = index.shape[1]
    return np.stack([(index == j).sum(axis=1) for j in range(n)], axis=1).astype(float)


def scaling_view(
    aggregate: pd.DataFrame,
    arms: pd.DataFrame,
    attribute: str | None = None,
    *,
    statistic: str = "iqm",
) -> pd.DataFrame:
    """Each arm's aggregate score per size beside one numeric attribute of the arm.

    ``aggregate`` is :func:`fewshot.stats.aggregate_curves` output (across tasks); ``arms`` has
    columns arm, role and the attributes. Without ``attribute`` the first numeric attribute that
    at least two arms carry is used. Columns: arm, role, attribute, attribute_value, size, estimate,
    low, high.
    """
    skip = set(ARM_COLUMNS)
    numeric = [
        c
        for c in arms.columns
        if c not in skip and pd.api.types.is_numeric_dtype(arms[c]) and arms[c].notna().sum() >= 2
    ]
    if attribute is None:
        if not numeric:
            raise InvalidInput(
                "no numeric attribute is carried by two arms or more (e.g. attributes = { params = 3e8 })."
            )
        attribute = numeric[0]
    elif attribute not in numeric:
        raise InvalidInput(
            f"attribute {attribute!r} is not a number carried by two arms or more. Usable: {', '.join(numeric) or 'none'}."
        )
    agg = aggregate[(aggregate["aggregate"] == statistic) & aggregate["group"].isna()]
    # renamed before the merge, so an attribute named like a column of the aggregate (size, ...)
    # cannot collide with it
    values = arms[["arm", attribute]].dropna().rename(columns={attribute: "attribute_value"})
    out = agg.merge(values, on="arm").assign(attribute=attribute)
    return (
        out[["arm", "role", "attribute", "attribute_value", "size", "estimate", "low", "high"]]
        .sort_values(["size", "attribute_value"])
        .reset_index(drop=True)
    )
