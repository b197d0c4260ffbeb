"""Sizes read off curves: episodes to reach a threshold, effective data transferred, and the
area under the normalised curve over log size, with their intervals (test inversion over sizes,
Student's t over the seeds' areas). Part of :mod:`fewshot.stats.transfer`, which re-exports them.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from fewshot.stats.baseline import check_baseline
from fewshot.stats.curves import CurveSettings
from fewshot.stats.inversion import level_crossing_set, seed_t_interval
from fewshot.stats.isotonic import first_reach, interpolate_log, isotonic_rows
from fewshot.stats.labels import effective_label, effective_mark, threshold_label
from fewshot.stats.resample import CurveResampler

__all__ = ["threshold_sizes", "effective_data", "curve_areas", "thin_baselines"]


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
