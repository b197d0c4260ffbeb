"""What pretraining is worth: arms against a baseline, paired by seed (the same subsets).

- paired differences of estimates per (task, size), and their mean across tasks;
- probability of improvement P(arm > baseline) (Agarwal et al. 2021), per task and averaged;
- episodes needed to reach a threshold, interpolated on log size, censored when never reached;
- effective data transferred and the data multiplier (Hernandez et al. 2021, "Scaling laws for
  transfer"): the size D_E the baseline would need to match the arm at size n, read off the
  baseline's isotonic fit on log size; D_T = D_E - n, multiplier D_E / n;
- the area under the normalised curve over log size.

Intervals, chosen by measured coverage (``tests/benchmarks/coverage.py --printed``): differences
per task use the interval method of the settings, their mean over tasks a stratified t
(:mod:`fewshot.stats.intervals`; other estimators than the mean a stratified expanded percentile);
P(improvement) Newcombe's score interval per task and MOVER from those over tasks; effective data
and episodes to a threshold test inversion over sizes (:mod:`fewshot.stats.inversion`; inf =
beyond the ladder); areas Student's t over the seeds' areas. Labels follow the intervals
(:mod:`fewshot.stats.labels`).

Every function here reads higher-is-better values (:func:`fewshot.stats.scores.orient` turns a
lower-is-better metric once, where scores are read), so none needs the metric's direction and a
study and its lower-is-better mirror give the same intervals and labels.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from fewshot.stats.baseline import check_baseline
from fewshot.stats.bootstrap import DegenerateCells, bootstrap_cells
from fewshot.stats.curves import FEW_SEEDS, CurveSettings
from fewshot.stats.estimators import estimator as get_estimator
from fewshot.stats.intervals import mover_mean_interval, newcombe_interval, stratified_mean_t
from fewshot.stats.progress import advance
from fewshot.stats.resample import CurveResampler, interval
from fewshot.stats.transfer_sizes import (  # the sizes half, re-exported here
    curve_areas,
    effective_data,
    thin_baselines,
    threshold_sizes,
)

__all__ = [
    "check_baseline",
    "paired_differences",
    "probability_of_improvement_table",
    "probability_of_improvement",
    "threshold_sizes",
    "effective_data",
    "curve_areas",
    "thin_baselines",
]


def _seed_cells(level: pd.Series) -> dict:  # type: ignore[type-arg]
    """Per arm, per (task, size): the seeds and their seed-level values, in ``level``'s order.

    ``level``: seed-level values indexed by arm, task, size, seed (sorted), computed once for
    every arm; split here in one pass over its index codes instead of a grouping per arm."""
    index = level.index
    codes = [np.asarray(c) for c in index.codes[:3]]
    starts = (
        np.flatnonzero(
            np.r_[
                True,
                (codes[0][1:] != codes[0][:-1])
                | (codes[1][1:] != codes[1][:-1])
                | (codes[2][1:] != codes[2][:-1]),
            ]
        )
        if len(level)
        else np.empty(0, int)
    )
    ends = np.r_[starts[1:], len(level)]
    arms, tasks, sizes = (index.levels[j][codes[j][starts]] for j in range(3))
    seeds, values = np.asarray(index.get_level_values(3)), level.to_numpy()
    cells: dict = {}  # type: ignore[type-arg]
    for arm, task, size, start, end in zip(arms, tasks, sizes, starts, ends, strict=True):
        cells.setdefault(arm, {})[(task, size)] = (seeds[start:end], values[start:end])
    return cells


def _paired_cells(cells: dict, arm: str, baseline: str):  # type: ignore[no-untyped-def,type-arg]
    """Per (task, size): the seed-level values of arm and baseline on their common seeds (in
    seed order), from :func:`_seed_cells`."""
    theirs = cells.get(baseline, {})
    for (task, size), (sx, x) in cells.get(arm, {}).items():
        found = theirs.get((task, size))
        if found is None:
            continue
        sy, y = found
        if len(sx) == len(sy) and np.array_equal(sx, sy):
            xs, ys = x, y
        else:
            _, i, j = np.intersect1d(sx, sy, assume_unique=True, return_indices=True)
            xs, ys = x[i], y[j]
        yield task, int(size), xs, ys, len(x), len(y)


def paired_differences(
    scores: pd.DataFrame,
    baseline: str,
    settings: CurveSettings,
    *,
    value: str = "score",
    arms: list[str] | None = None,
    over: list[str] | None = None,
) -> pd.DataFrame:
    """Arm minus baseline per (arm, task, size), paired by seed, plus each arm's mean over tasks.

    ``value`` must be higher-is-better (see :func:`fewshot.stats.scores.orient`). ``over`` names
    the tasks whose differences may be averaged (tasks in one unit, e.g. normalised); by default
    every task. Columns: arm, task (``"all"`` for the mean over tasks), size, difference, low,
    high, n_seeds, method, note.
    """
    settings.check()
    chosen = check_baseline(scores, baseline, arms)
    rows = []
    rng_root = np.random.SeedSequence(settings.seed)
    level = scores.dropna(subset=[value]).groupby(["arm", "task", "size", "seed"])[value].mean()
    cells = _seed_cells(level)
    advance("paired differences", 0, len(chosen))
    for k, (arm, child) in enumerate(zip(chosen, rng_root.spawn(len(chosen)), strict=True)):
        if k:
            advance("paired differences", k, len(chosen))
        rng = np.random.default_rng(child)
        for task, size, x, y, nx, ny in _paired_cells(cells, arm, baseline):
            n = len(x)
            note = (
                ""
                if n >= FEW_SEEDS
                else ("no common seeds" if n == 0 else f"under {FEW_SEEDS} seeds")
            )
            if nx != n or ny != n:
                note = "; ".join(
                    filter(None, [note, f"paired on {n} common seeds of {nx} and {ny}"])
                )
            estimate, low, high, method = _difference_cell(x, y, settings, rng)
            rows.append(
                {
                    "arm": arm,
                    "task": task,
                    "size": size,
                    "difference": estimate,
                    "low": low,
                    "high": high,
                    "n_seeds": n,
                    "method": method,
                    "note": note,
                }
            )
    advance("paired differences", len(chosen), len(chosen))
    frame = pd.DataFrame(
        rows,
        columns=["arm", "task", "size", "difference", "low", "high", "n_seeds", "method", "note"],
    )
    pool = scores if over is None else scores[scores["task"].isin(over)]
    across = _across_tasks(pool, baseline, chosen, settings, value)
    return pd.concat([frame, across], ignore_index=True) if len(across) else frame


def _difference_cell(
    x: np.ndarray, y: np.ndarray, settings: CurveSettings, rng: np.random.Generator
) -> tuple[float, float, float, str]:
    """Estimate, interval and method name of arm minus baseline on paired seed values."""
    if len(x) == 0:
        return np.nan, np.nan, np.nan, settings.method
    est = get_estimator(settings.estimator)
    if settings.estimator == "mean":  # a difference of means is the mean of the paired differences
        data, stat, use, name = (x - y)[None, :], est, settings.method, settings.method
    else:  # resample seed positions, then difference the two estimates

        def stat(idx: np.ndarray) -> np.ndarray:
            i = idx.astype(int)
            return est(x[i]) - est(y[i])

        closed = settings.method in ("percentile", "basic", "bca", "expanded")
        use = settings.method if closed else "t"  # t and Hall need the mean: bootstrap SE
        data, name = np.arange(len(x), dtype=float)[None, :], use if closed else "t (bootstrap SE)"
    mean = settings.estimator == "mean"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DegenerateCells)
        res = bootstrap_cells(
            data,
            stat,
            method=use,
            confidence=settings.confidence,
            resamples=settings.resamples,
            rng=rng,
            is_mean=mean,
            want_se=not mean,
        )
    return float(res.estimate[0]), float(res.low[0]), float(res.high[0]), name


def _across_tasks(scores, baseline, chosen, settings, value) -> pd.DataFrame:  # type: ignore[no-untyped-def]
    """Mean over tasks of the per-task differences, with a stratified (per-task) resample."""
    if scores["task"].nunique() < 2:
        return pd.DataFrame()
    rs = CurveResampler(scores, value, settings)
    rows = []
    for arm in chosen:
        tasks = [t for t in rs.seeds if rs.has(arm, t) and rs.has(baseline, t)]
        sizes = (
            sorted(
                set.intersection(
                    *[set(rs.sizes(arm, t)) & set(rs.sizes(baseline, t)) for t in tasks]
                )
            )
            if tasks
            else []
        )
        if not sizes:
            continue
        sz = np.array(sizes)
        point = np.mean([rs.point(arm, t, sz) - rs.point(baseline, t, sz) for t in tasks], axis=0)
        mean = settings.estimator == "mean"
        draws = (
            None
            if mean
            else np.mean([rs.boot(arm, t, sz) - rs.boot(baseline, t, sz) for t in tasks], axis=0)
        )
        n = min(min(rs.n_seeds(arm, t, sz), rs.n_seeds(baseline, t, sz)) for t in tasks)
        diffs = [rs.matrix(arm, t, sz) - rs.matrix(baseline, t, sz) for t in tasks]  # sizes × seeds
        weights = np.full(len(tasks), 1 / len(tasks))
        for k, size in enumerate(sizes):
            if draws is None:
                # closed-form stratified t on paired differences (fewshot.stats.intervals),
                # centred on the estimate (they differ only when runs are missing)
                _, lo, hi = stratified_mean_t([d[k] for d in diffs], weights, settings.confidence)
                half = (hi - lo) / 2
                lo, hi = point[k] - half, point[k] + half
            else:
                lo, hi = interval(draws[:, k], settings.confidence, n)
            rows.append(
                {
                    "arm": arm,
                    "task": "all",
                    "size": int(size),
                    "difference": float(point[k]),
                    "low": lo,
                    "high": hi,
                    "n_seeds": n,
                    "method": "stratified t" if mean else "stratified expanded percentile",
                    "note": f"mean over {len(tasks)} tasks",
                }
            )
    return pd.DataFrame(rows)


def probability_of_improvement(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """The probability of improvement of two samples (Agarwal et al. 2021): P(X > Y) + P(X = Y)/2
    over all pairs, along the last axis (the Mann-Whitney U / (n m)). For the table of a study,
    with intervals, see :func:`probability_of_improvement_table`."""
    gt = (x[..., :, None] > y[..., None, :]).mean(axis=(-2, -1))
    eq = (x[..., :, None] == y[..., None, :]).mean(axis=(-2, -1))
    return gt + 0.5 * eq


def probability_of_improvement_table(
    scores: pd.DataFrame,
    baseline: str,
    settings: CurveSettings,
    *,
    value: str = "score",
    arms: list[str] | None = None,
    over: list[str] | None = None,
) -> pd.DataFrame:
    """P(arm > baseline) per (arm, task, size) and averaged over tasks (task ``"all"``).

    ``value`` must be higher-is-better; ``over`` names the tasks the average may use (default:
    all). Columns: arm, task, size, probability, low, high, n_seeds.
    """
    chosen = check_baseline(scores, baseline, arms)
    rs = CurveResampler(scores, value, settings)
    rows = []  # (arm, task, size, probability, runs of arm, runs of baseline)
    for arm in chosen:
        for task in rs.seeds:
            if not (rs.has(arm, task) and rs.has(baseline, task)):
                continue
            sizes = np.array(sorted(set(rs.sizes(arm, task)) & set(rs.sizes(baseline, task))))
            if not len(sizes):
                continue
            xa, xb = rs.matrix(arm, task, sizes), rs.matrix(baseline, task, sizes)  # sizes × seeds
            for k, size in enumerate(sizes):
                a, b = xa[k][np.isfinite(xa[k])], xb[k][np.isfinite(xb[k])]
                p = float(probability_of_improvement(a, b)) if min(len(a), len(b)) else np.nan
                rows.append((arm, task, int(size), p, len(a), len(b)))
    cols = ["arm", "task", "size", "probability", "m", "n"]
    per = pd.DataFrame(rows, columns=cols)
    per["n_seeds"] = np.minimum(per["m"], per["n"])
    # Newcombe's score interval (fewshot.stats.intervals): never a single point
    ok = (per["n_seeds"] >= 2).to_numpy()
    low, high = np.full(len(per), np.nan), np.full(len(per), np.nan)
    if ok.any():
        low[ok], high[ok] = newcombe_interval(
            per["probability"].to_numpy()[ok],
            per["m"].to_numpy()[ok],
            per["n"].to_numpy()[ok],
            settings.confidence,
        )
    per["low"], per["high"] = low, high
    pooled = per[per["n_seeds"] > 0]
    if over is not None:  # only tasks in one unit may be averaged
        pooled = pooled[pooled["task"].isin(over)]
    means = _poi_over_tasks(pooled)
    out = pd.concat([per, means], ignore_index=True) if len(means) else per
    return out[["arm", "task", "size", "probability", "low", "high", "n_seeds"]]


def _poi_over_tasks(per: pd.DataFrame) -> pd.DataFrame:
    """Mean P(improvement) over the tasks of each (arm, size) with two tasks or more, with MOVER
    limits from the per-task Newcombe intervals (:func:`fewshot.stats.intervals.mover_mean_interval`;
    tasks hold different seeds' runs, so their estimates are independent)."""
    groups = [(key, g) for key, g in per.groupby(["arm", "size"], sort=False) if len(g) >= 2]
    if not groups:
        return pd.DataFrame()
    width = max(len(g) for _, g in groups)

    def pad(col: str) -> np.ndarray:
        return np.array(
            [
                np.pad(g[col].to_numpy(float), (0, width - len(g)), constant_values=np.nan)
                for _, g in groups
            ]
        )

    low, high = mover_mean_interval(pad("probability"), pad("low"), pad("high"))
    return pd.DataFrame(
        {
            "arm": [arm for (arm, _), _ in groups],
            "task": "all",
            "size": [int(size) for (_, size), _ in groups],
            "probability": [float(g["probability"].mean()) for _, g in groups],
            "low": low,
            "high": high,
            "n_seeds": [int(g["n_seeds"].min()) for _, g in groups],
        }
    )
