"""Performance profiles and the scaling view.

A performance profile (Agarwal et al. 2021, section 4) gives, for each threshold τ, the
fraction of runs whose normalised score exceeds τ (``over="runs"``), or the fraction of
tasks whose estimate does (``over="tasks"``). Fractions of runs get a score interval over the
tasks' counts (:func:`stratified_score`): in simulation (``tests/benchmarks/coverage.py
--printed``) the percentile interval of a stratified resample it replaced held the truth only
59-86% of the time at 3-10 seeds, 18-42% of them a single value (all of a task's few runs on one
side of τ); the score interval covered 95-97% and is never a single value. Fractions of tasks
get none (:data:`NO_TASK_INTERVAL` says why): the truth is a count over the study's few fixed tasks, with one more possible value than
there are tasks, and in simulation (``tests/benchmarks/coverage.py --printed``) a resampled
interval of it held the truth 98.6-99.9% of the time at 3-10 seeds, 64-78% of them a single
value, so its nominal 95% meant nothing; each task's uncertainty is in its episodes to the
threshold. The scaling view sets each arm's score at each size beside a
numeric attribute of the arm (e.g. its parameter count).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from fewshot.errors import InvalidInput
from fewshot.schema import ARM_COLUMNS
from fewshot.stats.curves import CurveSettings
from fewshot.stats.progress import advance
from fewshot.stats.resample import CurveResampler

__all__ = ["NO_TASK_INTERVAL", "performance_profile", "scaling_view", "stratified_score"]

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
    n_tasks, n_seeds, note (over tasks: low and high are NaN, the note says why).

    Over runs, the fraction pools every run of the tasks present (a task weighs as its runs do:
    equally when the tasks have the same seeds), and its interval is :func:`stratified_score`
    over the tasks' counts; none below 2 seeds in a task, as for every other interval."""
    if over not in ("runs", "tasks"):
        raise InvalidInput(f"a profile is over 'runs' or 'tasks'. Got {over!r}.")
    settings.check()
    taus = np.linspace(0, 1.5, 31) if taus is None else np.asarray(taus, dtype=float)
    rs = CurveResampler(scores, value, settings)
    arms = list(dict.fromkeys(scores["arm"]))
    cells: list[_Cell] = []
    for k, arm in enumerate(arms):
        advance("performance profiles", k, len(arms))
        tasks = [t for t in rs.seeds if rs.has(arm, t)]
        sizes = sorted(set().union(*[set(rs.sizes(arm, t)) for t in tasks])) if tasks else []
        for size in sizes:
            present = [t for t in tasks if size in rs.sizes(arm, t)]
            sz = np.array([size])
            n = min(rs.n_seeds(arm, t, sz) for t in present)
            if over == "tasks":  # no interval: a fraction of tasks gets none (NO_TASK_INTERVAL)
                point = np.array([rs.point(arm, t, sz)[0] for t in present])  # tasks
                frac = (point[None, :] > taus[:, None]).mean(axis=1)
                cells.append((arm, size, len(present), n, frac, None, None))
                continue
            runs = [rs.matrix(arm, t, sz)[0] for t in present]
            with np.errstate(invalid="ignore"):  # a missing run (NaN) is above no τ
                counts = np.stack([(x[:, None] > taus[None, :]).sum(axis=0) for x in runs])
            sizes_t = np.array([np.isfinite(x).sum() for x in runs])
            frac = counts.sum(axis=0) / sizes_t.sum()
            cells.append((arm, size, len(present), n, frac, counts, sizes_t))
    advance("performance profiles", len(arms), len(arms))
    lows, highs = _bands(cells, len(taus), settings.confidence)
    rows = [
        {
            "arm": arm,
            "size": int(size),
            "tau": float(tau),
            "fraction": float(frac[j]),
            "low": float(lows[c, j]),
            "high": float(highs[c, j]),
            "over": over,
            "n_tasks": n_tasks,
            "n_seeds": n,
            "note": NO_TASK_INTERVAL if over == "tasks" else "",
        }
        for c, (arm, size, n_tasks, n, frac, _, _) in enumerate(cells)
        for j, tau in enumerate(taus)
    ]
    return pd.DataFrame(rows, columns=COLUMNS)


# arm, size, tasks present, fewest seeds, fraction per τ, and over runs: counts (tasks × τ) and
# runs per task
_Cell = tuple[str, int, int, int, np.ndarray, np.ndarray | None, np.ndarray | None]
COLUMNS = ["arm", "size", "tau", "fraction", "low", "high", "over", "n_tasks", "n_seeds", "note"]


def _bands(cells: list[_Cell], n_taus: int, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Every cell's interval per τ in one batch (tasks padded with empty ones); NaN over tasks
    and below 2 seeds."""
    lows = np.full((len(cells), n_taus), np.nan)
    highs = lows.copy()
    kept = {
        c: (counts, sizes_t)
        for c, (_, _, _, fewest, _, counts, sizes_t) in enumerate(cells)
        if counts is not None and sizes_t is not None and fewest >= 2
    }
    if not kept:
        return lows, highs
    width = max(len(sizes_t) for _, sizes_t in kept.values())
    k = np.zeros((len(kept), n_taus, width))
    n = np.zeros((len(kept), n_taus, width))
    for i, (counts, sizes_t) in enumerate(kept.values()):
        k[i, :, : len(sizes_t)] = counts.T
        n[i, :, : len(sizes_t)] = sizes_t[None, :]
    lo, hi = stratified_score(k.reshape(-1, width), n.reshape(-1, width), confidence)
    rows = list(kept)
    lows[rows], highs[rows] = lo.reshape(len(rows), n_taus), hi.reshape(len(rows), n_taus)
    return lows, highs


def stratified_score(
    k: np.ndarray, n: np.ndarray, confidence: float = 0.95
) -> tuple[np.ndarray, np.ndarray]:
    """Score interval of a pooled proportion Σ k_t / Σ n_t over independent strata (tasks).

    ``k`` and ``n`` are cases × strata (counts above τ, runs; strata with n = 0 are ignored). The
    interval is every θ the score test does not reject (Wilson 1927): (p̂ - θ)² <= z² V(θ), with
    V(θ) = Σ n_t p̃_t (1 - p̃_t) / N² at the strata's maximum-likelihood proportions p̃_t under
    Σ n_t p̃_t / N = θ (the restricted estimate, as in Miettinen & Nurminen 1985). With one
    stratum it is Wilson's interval; with several it is narrower where the tasks differ (their
    spread is no uncertainty) and never a single value. Along the Lagrange multiplier μ of the
    restriction, p̃_t(μ) is a closed form and θ(μ) decreases, so each end is one bisection in μ.
    """
    k, n = np.asarray(k, dtype=float), np.asarray(n, dtype=float)
    if k.ndim != 2 or k.shape != n.shape:
        raise InvalidInput(
            f"`k` and `n` must be cases × strata arrays of one shape. Got {k.shape} and {n.shape}."
        )
    if not (np.isfinite(n).all() and np.isfinite(k).all() and (k >= 0).all() and (k <= n).all()):
        raise InvalidInput("counts must be finite with 0 <= `k` <= `n` in every stratum.")
    if (n.sum(axis=-1) <= 0).any():
        raise InvalidInput("every case needs at least one run (`n` sums to 0 in a case).")
    if not 0 < confidence < 1:
        raise InvalidInput(f"`confidence` must lie between 0 and 1, e.g. 0.95. Got {confidence!r}.")
    total = n.sum(axis=-1)
    q = np.divide(k, n, out=np.zeros_like(k), where=n > 0)
    p_hat = k.sum(axis=-1) / total
    z2 = stats.norm.ppf(0.5 + confidence / 2) ** 2
    # lower end: μ > 0 (θ below p̂); upper end: μ < 0. Bisect u = asinh(μ) between the estimate
    # (u = 0, accepted) and u = ±40 (θ within 1e-17 of 0 or 1)
    ends = []
    for sign in (1.0, -1.0):
        inside, outside = np.zeros_like(p_hat), np.full_like(p_hat, 40.0 * sign)
        for _ in range(64):
            u = (inside + outside) / 2
            p = _restricted(q, np.sinh(u)[:, None])
            theta = (n * p).sum(axis=-1) / total
            var = (n * p * (1 - p)).sum(axis=-1) / total**2
            accept = (p_hat - theta) ** 2 <= z2 * var
            inside, outside = np.where(accept, u, inside), np.where(accept, outside, u)
        p = _restricted(q, np.sinh(inside)[:, None])
        ends.append((n * p).sum(axis=-1) / total)
    low = np.where(p_hat == 0, 0.0, np.minimum(ends[0], p_hat))
    high = np.where(p_hat == 1, 1.0, np.maximum(ends[1], p_hat))
    return low, high


def _restricted(q: np.ndarray, mu: np.ndarray) -> np.ndarray:
    """The stratum proportion p̃ at multiplier μ: the root in [0, 1] of q - p = μ p (1 - p)
    (the likelihood's stationarity, q/p - (1-q)/(1-p) = μ; boundary solutions included)."""
    one = 1 + mu
    root = np.sqrt(np.maximum(one**2 - 4 * mu * q, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        # 2q / (1 + μ + root) and (1 + μ - root) / 2μ are the same root; each is used where it
        # does not cancel
        p = np.where(one > 0, 2 * q / (one + root), (one - root) / (2 * mu))
    return np.clip(np.nan_to_num(p, nan=0.0), 0.0, 1.0)


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
