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
P(improvement) Newcombe's score interval; effective data and episodes to a threshold test
inversion over sizes (:mod:`fewshot.stats.inversion`; inf = beyond the ladder); areas Student's t
over the seeds' areas. Labels follow the intervals (:mod:`fewshot.stats.labels`).

Every function here reads higher-is-better values (:func:`fewshot.stats.scores.orient` turns a
lower-is-better metric once, where scores are read), so none needs the metric's direction and a
study and its lower-is-better mirror give the same intervals and labels.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from fewshot.errors import InvalidInput
from fewshot.stats.bootstrap import DegenerateCells, bootstrap_cells
from fewshot.stats.curves import CurveSettings
from fewshot.stats.estimators import estimator as get_estimator
from fewshot.stats.intervals import (
    newcombe_interval,
    newcombe_mean_interval,
    stratified_mean_t,
)
from fewshot.stats.inversion import level_crossing_set, seed_t_interval
from fewshot.stats.isotonic import first_reach, interpolate_log, isotonic_rows
from fewshot.stats.labels import effective_label, effective_mark, threshold_label
from fewshot.stats.resample import CurveResampler, interval

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


def check_baseline(scores: pd.DataFrame, baseline: str, arms: list[str] | None = None) -> list[str]:
    """The arms to compare with ``baseline``; unknown names are errors that list the known arms."""
    known = list(dict.fromkeys(scores["arm"]))
    if baseline not in known:
        raise InvalidInput(
            f"baseline {baseline!r} has no scores. Arms with scores: {', '.join(known)}."
        )
    chosen = [a for a in known if a != baseline] if arms is None else arms
    for a in chosen:
        if a not in known:
            raise InvalidInput(f"arm {a!r} has no scores. Arms with scores: {', '.join(known)}.")
        if a == baseline:
            raise InvalidInput(f"arm {a!r} is the baseline; compare other arms with it.")
    return chosen


def _paired_cells(scores: pd.DataFrame, value: str, arm: str, baseline: str):  # type: ignore[no-untyped-def]
    """Per (task, size): the seed-level values of arm and baseline on their common seeds."""
    level = scores.dropna(subset=[value]).groupby(["arm", "task", "size", "seed"])[value].mean()
    a, b = level.loc[arm], level.loc[baseline]
    for task in a.index.get_level_values("task").unique():
        if task not in b.index.get_level_values("task"):
            continue
        for size in sorted(a.loc[task].index.get_level_values("size").unique()):
            if size not in b.loc[task].index.get_level_values("size"):
                continue
            x, y = a.loc[(task, size)], b.loc[(task, size)]
            common = x.index.intersection(y.index)
            yield (
                task,
                int(size),
                x.loc[common].to_numpy(),
                y.loc[common].to_numpy(),
                len(x),
                len(y),
            )


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
    est_name = settings.estimator
    est = get_estimator(est_name)
    rows = []
    rng_root = np.random.SeedSequence(settings.seed)
    for arm, child in zip(chosen, rng_root.spawn(len(chosen)), strict=True):
        rng = np.random.default_rng(child)
        for task, size, x, y, nx, ny in _paired_cells(scores, value, arm, baseline):
            n = len(x)
            note = "" if n >= 3 else ("no common seeds" if n == 0 else "under 3 seeds")
            if nx != n or ny != n:
                note = "; ".join(
                    filter(None, [note, f"paired on {n} common seeds of {nx} and {ny}"])
                )
            if n == 0:
                rows.append(
                    {
                        "arm": arm,
                        "task": task,
                        "size": size,
                        "difference": np.nan,
                        "low": np.nan,
                        "high": np.nan,
                        "n_seeds": 0,
                        "method": settings.method,
                        "note": note,
                    }
                )
                continue
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", DegenerateCells)
                if (
                    est_name == "mean"
                ):  # a difference of means is the mean of the paired differences
                    res = bootstrap_cells(
                        (x - y)[None, :],
                        est,
                        method=settings.method,
                        confidence=settings.confidence,
                        resamples=settings.resamples,
                        rng=rng,
                        is_mean=True,
                    )
                    method = settings.method
                else:  # resample seed positions, then difference the two estimates

                    def diff(idx: np.ndarray, x=x, y=y) -> np.ndarray:
                        i = idx.astype(int)
                        return est(x[i]) - est(y[i])

                    closed = settings.method in ("percentile", "basic", "bca", "expanded")
                    use = (
                        settings.method if closed else "t"
                    )  # t and Hall need the mean: bootstrap SE
                    res = bootstrap_cells(
                        np.arange(n, dtype=float)[None, :],
                        diff,
                        method=use,
                        confidence=settings.confidence,
                        resamples=settings.resamples,
                        rng=rng,
                    )
                    method = use if closed else "t (bootstrap SE)"
            rows.append(
                {
                    "arm": arm,
                    "task": task,
                    "size": size,
                    "difference": float(res.estimate[0]),
                    "low": float(res.low[0]),
                    "high": float(res.high[0]),
                    "n_seeds": n,
                    "method": method,
                    "note": note,
                }
            )
    frame = pd.DataFrame(
        rows,
        columns=["arm", "task", "size", "difference", "low", "high", "n_seeds", "method", "note"],
    )
    pool = scores if over is None else scores[scores["task"].isin(over)]
    across = _across_tasks(pool, baseline, chosen, settings, value)
    return pd.concat([frame, across], ignore_index=True) if len(across) else frame


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
    means = []
    pooled = per[per["n_seeds"] > 0]
    if over is not None:  # only tasks in one unit may be averaged
        pooled = pooled[pooled["task"].isin(over)]
    for (arm, size), g in pooled.groupby(["arm", "size"], sort=False):
        if len(g) < 2:
            continue
        means.append((arm, size, g))
    frames = [per]
    if means:
        width = max(len(g) for *_, g in means)
        pad = lambda col: np.array(  # noqa: E731
            [
                np.pad(g[col].to_numpy(float), (0, width - len(g)), constant_values=np.nan)
                for *_, g in means
            ]
        )
        lo_all, hi_all = newcombe_mean_interval(
            pad("probability"), pad("m"), pad("n"), settings.confidence
        )
        n_all = np.array([int(g["n_seeds"].min()) for *_, g in means])
        lo_all = np.where(n_all >= 2, lo_all, np.nan)
        hi_all = np.where(n_all >= 2, hi_all, np.nan)
        frames.append(
            pd.DataFrame(
                {
                    "arm": [m[0] for m in means],
                    "task": "all",
                    "size": [int(m[1]) for m in means],
                    "probability": [float(g["probability"].mean()) for *_, g in means],
                    "low": lo_all,
                    "high": hi_all,
                    "n_seeds": n_all,
                }
            )
        )
    out = pd.concat(frames, ignore_index=True)
    return out[["arm", "task", "size", "probability", "low", "high", "n_seeds"]]


def threshold_sizes(
    scores: pd.DataFrame,
    threshold: float,
    settings: CurveSettings,
    *,
    value: str = "normalised",
) -> pd.DataFrame:
    """Episodes each arm needs on each task to reach ``threshold``, interpolated on log size.

    A zero-shot point (size 0) that reaches it counts as reaching it with no data. Columns: arm,
    task, threshold, episodes, low, high, censor (``""``, ``"zero-shot"``, ``"at_most"`` = already
    at the smallest size, ``"not_reached"`` = not by the largest size: the point estimate's
    censoring), label (``"zero-shot"``, ``"already there"``, ``"not reached"`` only when the interval
    supports it, else ``""``), smallest, largest, n_seeds. low/high: test inversion (0 = at or below
    the smallest size, inf = beyond the ladder).
    """
    settings.check()
    rs = CurveResampler(scores, value, settings)
    rows = []
    for arm, task in rs.values:
        sizes = rs.sizes(arm, task)
        n = rs.n_seeds(arm, task, sizes)
        point = rs.point(arm, task, sizes)[None, :]
        ep, censor = _reach(point, sizes, threshold)
        lo, hi = _threshold_interval(rs.matrix(arm, task, sizes).T, sizes, threshold, settings)
        positive = sizes[sizes > 0]
        rows.append(
            {
                "arm": arm,
                "task": task,
                "threshold": threshold,
                "episodes": float(ep[0]),
                "low": lo,
                "high": hi,
                "censor": censor[0],
                "label": threshold_label(
                    lo, hi, positive.min() if len(positive) else 0, sizes.max()
                ),
                "smallest": int(positive.min()) if len(positive) else 0,
                "largest": int(sizes.max()),
                "n_seeds": n,
            }
        )
    return pd.DataFrame(rows)


def _threshold_interval(
    seeds: np.ndarray, sizes: np.ndarray, threshold: float, settings: CurveSettings
) -> tuple[float, float]:
    """Sizes at which the arm's curve is not distinguishable from the threshold (test inversion
    over complete seeds); a zero-shot point significantly above it gives [0, 0]."""
    seeds = seeds[np.isfinite(seeds).all(axis=1)]
    if len(seeds) < 2:
        return float("nan"), float("nan")
    zero = sizes[0] == 0
    pos = sizes > 0
    if pos.sum() == 0:
        return float("nan"), float("nan")
    lo, hi = level_crossing_set(
        seeds[:, pos], np.full(len(seeds), threshold), sizes[pos], settings.confidence
    )
    if zero:
        z0 = seeds[:, 0] - threshold
        z_lo, z_hi = seed_t_interval(z0, settings.confidence)
        if z_lo > 0:  # zero-shot is above the threshold: reached with no data
            return 0.0, 0.0
        if z_hi >= 0:  # zero-shot may reach it
            lo = 0.0
    return lo, hi


def _reach(
    curves: np.ndarray, sizes: np.ndarray, threshold: float
) -> tuple[np.ndarray, np.ndarray]:
    target = np.full(len(curves), threshold)
    if sizes[0] == 0:
        zero = curves[:, 0] >= threshold
        pos_size, pos_censor = first_reach(curves[:, 1:], sizes[1:].astype(float), target)
        size = np.where(zero, 0.0, pos_size)
        censor = np.where(zero, "zero-shot", pos_censor)
        return size, censor
    return first_reach(curves, sizes.astype(float), target)


def effective_data(
    scores: pd.DataFrame,
    baseline: str,
    settings: CurveSettings,
    *,
    value: str = "score",
    arms: list[str] | None = None,
) -> pd.DataFrame:
    """Effective data transferred per (arm, task, size >= 1).

    ``value`` must be higher-is-better (see :func:`fewshot.stats.scores.orient`): the baseline's
    curve is taken to be non-decreasing. Tasks where the baseline has results at fewer than two
    sizes >= 1 have no curve to read and are left out (:func:`thin_baselines` names them).
    Columns: arm, task, size, arm_estimate, effective (D_E), transferred (D_T = D_E - n),
    multiplier (D_E / n) with lows and highs (inf: beyond the baseline's ladder), censor (``""``;
    ``"lower_bound"`` when the arm beats the baseline's best point, so D_E exceeds the largest
    size; ``"upper_bound"`` when the arm is below the baseline's smallest point), mark
    (``">="``/``"<="`` only when the interval lies beyond the ladder too), label
    (``helps``/``hurts`` when the whole interval of D_T is above/below zero, else ``no clear
    difference``), hurts (label is ``hurts``), n_seeds.
    """
    settings.check()
    chosen = check_baseline(scores, baseline, arms)
    rs = CurveResampler(scores, value, settings)
    rows = []
    for arm in chosen:
        for task in rs.seeds:
            if not (rs.has(arm, task) and rs.has(baseline, task)):
                continue
            b_sizes = rs.sizes(baseline, task)
            b_sizes = b_sizes[b_sizes > 0]
            if len(b_sizes) < 2:
                continue
            a_sizes = rs.sizes(arm, task)
            a_sizes = a_sizes[a_sizes > 0]
            fit = isotonic_rows(rs.point(baseline, task, b_sizes)[None, :])
            a_point = rs.point(arm, task, a_sizes)
            a_seeds = rs.matrix(arm, task, a_sizes)  # sizes × seeds
            b_seeds = rs.matrix(baseline, task, b_sizes).T  # seeds × sizes
            n = min(rs.n_seeds(arm, task, a_sizes), rs.n_seeds(baseline, task, b_sizes))
            for k, size in enumerate(a_sizes):
                d_e, censor = _read_off(fit, b_sizes, np.array([a_point[k]]))
                # test inversion over sizes, paired by seed (fewshot.stats.inversion)
                ok = np.isfinite(a_seeds[k]) & np.isfinite(b_seeds).all(axis=1)
                lo, hi = level_crossing_set(
                    b_seeds[ok], a_seeds[k][ok], b_sizes, settings.confidence
                )
                d_t = float(d_e[0] - size)
                rows.append(
                    {
                        "arm": arm,
                        "task": task,
                        "size": int(size),
                        "arm_estimate": float(a_point[k]),
                        "effective": float(d_e[0]),
                        "effective_low": lo,
                        "effective_high": hi,
                        "transferred": d_t,
                        "transferred_low": lo - size,
                        "transferred_high": hi - size,
                        "multiplier": float(d_e[0] / size),
                        "multiplier_low": lo / size,
                        "multiplier_high": hi / size,
                        "censor": censor[0],
                        # labels only where the interval supports them (fewshot.stats.labels)
                        "mark": effective_mark(censor[0], lo, hi, b_sizes[0], b_sizes[-1]),
                        "label": effective_label(size, lo, hi),
                        "hurts": effective_label(size, lo, hi) == "hurts",
                        "n_seeds": n,
                    }
                )
    return pd.DataFrame(rows)


def thin_baselines(scores: pd.DataFrame, baseline: str, *, value: str = "score") -> list[str]:
    """Tasks where ``baseline`` has results at fewer than two sizes >= 1 (no curve to read)."""
    data = scores.dropna(subset=[value])
    data = data[(data["arm"] == baseline) & (data["size"] > 0)]
    counts = data.groupby("task")["size"].nunique()
    return sorted(t for t in scores["task"].unique() if counts.get(t, 0) < 2)


def _read_off(
    fit: np.ndarray, sizes: np.ndarray, level: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Invert monotone fits (rows × sizes) at ``level`` per row, on log size.

    Levels beyond the fit's ends are censored: the end size is returned with a flag
    (``"lower_bound"`` above the top, ``"upper_bound"`` below the bottom). The interval around it
    comes from test inversion (:func:`fewshot.stats.inversion.level_crossing_set`), where sizes
    beyond the ladder are infinite.
    """
    if fit.shape[0] == 1 and len(level) > 1:
        fit = np.repeat(fit, len(level), axis=0)
    top = fit[:, -1]
    bottom = fit[:, 0]
    reached = fit >= level[:, None]
    k = np.where(reached.any(axis=1), reached.argmax(axis=1), len(sizes) - 1)
    rows = np.arange(len(level))
    prev, cur = fit[rows, np.maximum(k - 1, 0)], fit[rows, k]
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(cur > prev, (level - prev) / (cur - prev), 0.0)
    inside = interpolate_log(sizes.astype(float), k, np.clip(frac, 0, 1))
    above = level > top
    below = level < bottom
    d_e = np.where(above, sizes[-1], np.where(below, sizes[0], np.where(k == 0, sizes[0], inside)))
    censor = np.where(above, "lower_bound", np.where(below, "upper_bound", ""))
    return d_e.astype(float), censor


def curve_areas(
    scores: pd.DataFrame, settings: CurveSettings, *, value: str = "normalised"
) -> pd.DataFrame:
    """Area under each (arm, task) curve over log size (sizes >= 1), divided by the log range:
    the curve's mean height on a log axis. Columns: arm, task, auc, low, high, n_seeds, sizes."""
    settings.check()
    rs = CurveResampler(scores, value, settings)
    rows = []
    for arm, task in rs.values:
        sizes = rs.sizes(arm, task)
        sizes = sizes[sizes > 0]
        if len(sizes) < 2:
            continue
        x = np.log(sizes.astype(float))
        point = np.trapezoid(rs.point(arm, task, sizes), x) / (x[-1] - x[0])
        # each seed's area, then Student's t over seeds (the area is linear in the curve)
        per_seed = np.trapezoid(rs.matrix(arm, task, sizes).T, x, axis=1) / (x[-1] - x[0])
        n = rs.n_seeds(arm, task, sizes)
        lo, hi = seed_t_interval(per_seed, settings.confidence)
        rows.append(
            {
                "arm": arm,
                "task": task,
                "auc": float(point),
                "low": lo,
                "high": hi,
                "n_seeds": n,
                "sizes": f"{int(sizes[0])}-{int(sizes[-1])}",
            }
        )
    return pd.DataFrame(rows)
