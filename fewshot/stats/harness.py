"""The coverage harness: every interval ``curves`` and ``compare`` print, against known truth.

:func:`study_intervals` runs one synthetic study (:mod:`fewshot.stats.simulate`) through the
same library functions the two commands call, with the same settings, and lines up each
printed interval with its true value; :func:`coverage_table` repeats that over many studies,
seed counts and noise shapes and summarises per quantity: coverage (share of printed
intervals that hold the truth), mean width, share of degenerate (zero-width) intervals and
share of rows printed without an interval. ``tests/benchmarks/coverage.py`` prints the full
table; ``tests/test_harness.py`` runs a small one.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from fewshot.stats.aggregate import aggregate_curves
from fewshot.stats.curves import CurveSettings, curves
from fewshot.stats.profiles import performance_profile
from fewshot.stats.simulate import Scenario, default_scenario, simulate_scores
from fewshot.stats.transfer import (
    curve_areas,
    effective_data,
    paired_differences,
    probability_of_improvement_table,
    threshold_sizes,
)

__all__ = ["PROFILE_TAUS", "QUANTITIES", "WITHOUT_INTERVAL", "study_intervals", "coverage_table"]

QUANTITIES = (
    "cell mean",
    "aggregate iqm",
    "aggregate mean",
    "aggregate median",
    "aggregate optimality gap",
    "group iqm",
    "group mean",
    "group median",
    "group optimality gap",
    "difference per task",
    "difference over tasks",
    "P(improvement) per task",
    "P(improvement) over tasks",
    "effective data",  # and D_T = D_E - n: the same interval shifted by n, so the same coverage
    "data multiplier",
    "episodes to threshold",
    "area under curve",
    "fraction of tasks above",
    "fraction of runs above",
)
# the performance profile's thresholds the harness checks, at the largest size (where the report
# and ``plot --kind profile`` draw it): from where nearly every run is above to where nearly none is
PROFILE_TAUS = (0.6, 0.7, 0.8, 0.9, 1.0)
# printed as an estimate only, with the reason (fewshot.stats.profiles.NO_TASK_INTERVAL)
WITHOUT_INTERVAL = ("fraction of tasks above",)


def _rows(quantity: str, low, high, truth) -> pd.DataFrame:  # type: ignore[no-untyped-def]
    return pd.DataFrame(
        {
            "quantity": quantity,
            "low": np.asarray(low, dtype=float),
            "high": np.asarray(high, dtype=float),
            "truth": np.asarray(truth, dtype=float),
        }
    )


def _per_task_and_over(name: str, table: pd.DataFrame, sc: Scenario, truth) -> list[pd.DataFrame]:  # type: ignore[no-untyped-def]
    """Rows "<name> per task" and "<name> over tasks" (task "all": the mean of the tasks' truths)."""
    truths = np.array(
        [
            np.mean([truth(a, k, int(n)) for k in (list(sc.tasks) if t == "all" else [t])])
            for a, t, n in zip(table["arm"], table["task"], table["size"], strict=True)
        ]
    )
    over = (table["task"] == "all").to_numpy()
    low, high = table["low"].to_numpy(), table["high"].to_numpy()
    return [
        _rows(f"{name} per task", low[~over], high[~over], truths[~over]),
        _rows(f"{name} over tasks", low[over], high[over], truths[over]),
    ]


def study_intervals(
    scores: pd.DataFrame, sc: Scenario, noise: str, settings: CurveSettings
) -> pd.DataFrame:
    """Every printed interval of one study with its true value. Columns: quantity, low, high, truth."""
    base = sc.baseline
    parts = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cur = curves(scores, settings, value="score")
        parts.append(
            _rows(
                "cell mean",
                cur["low"],
                cur["high"],
                [
                    sc.mean(a, t, [n])[0]
                    for a, t, n in zip(cur["arm"], cur["task"], cur["size"], strict=True)
                ],
            )
        )
        for by_group, label in ((False, "aggregate"), (True, "group")):
            agg = aggregate_curves(scores, settings, by_group=by_group)
            truths = {}
            for _, r in agg.iterrows():
                tasks = [t for t, (g, _) in sc.tasks.items() if not by_group or g == r["group"]]
                key = (r["arm"], r["size"], r["group"] if by_group else None)
                if key not in truths:
                    truths[key] = sc.truth_pooled(r["arm"], int(r["size"]), noise, tasks)
            for name in ("iqm", "mean", "median", "optimality_gap"):
                g = agg[agg["aggregate"] == name]
                keys = zip(
                    g["arm"], g["size"], g["group"] if by_group else [None] * len(g), strict=True
                )
                parts.append(
                    _rows(
                        f"{label} {name.replace('_', ' ')}",
                        g["low"],
                        g["high"],
                        [truths[k][name] for k in keys],
                    )
                )
        diff = paired_differences(scores, base, settings, value="normalised")
        parts += _per_task_and_over(
            "difference",
            diff,
            sc,
            lambda a, k, n: sc.mean(a, k, [n])[0] - sc.mean(base, k, [n])[0],
        )
        poi = probability_of_improvement_table(scores, base, settings, value="normalised")
        parts += _per_task_and_over(
            "P(improvement)", poi, sc, lambda a, k, n: sc.truth_poi(a, k, n, noise)
        )
        eff = effective_data(scores, base, settings, value="score")
        d_e = np.array(
            [
                sc.truth_effective(a, t, int(n))
                for a, t, n in zip(eff["arm"], eff["task"], eff["size"], strict=True)
            ]
        )
        n = eff["size"].to_numpy(dtype=float)
        parts.append(_rows("effective data", eff["effective_low"], eff["effective_high"], d_e))
        parts.append(
            _rows("data multiplier", eff["multiplier_low"], eff["multiplier_high"], d_e / n)
        )
        thr = threshold_sizes(scores, sc.threshold, settings)
        parts.append(
            _rows(
                "episodes to threshold",
                thr["low"],
                thr["high"],
                [sc.truth_threshold(a, t) for a, t in zip(thr["arm"], thr["task"], strict=True)],
            )
        )
        auc = curve_areas(scores, settings)
        parts.append(
            _rows(
                "area under curve",
                auc["low"],
                auc["high"],
                [sc.truth_auc(a, t) for a, t in zip(auc["arm"], auc["task"], strict=True)],
            )
        )
        prof = performance_profile(scores, settings, taus=np.array([sc.threshold]), over="tasks")
        parts.append(
            _rows(
                "fraction of tasks above",
                prof["low"],
                prof["high"],
                [
                    sc.truth_fraction(a, int(n))
                    for a, n in zip(prof["arm"], prof["size"], strict=True)
                ],
            )
        )
        largest = scores[scores["size"] == scores["size"].max()]
        runs = performance_profile(largest, settings, taus=np.array(PROFILE_TAUS), over="runs")
        parts.append(
            _rows(
                "fraction of runs above",
                runs["low"],
                runs["high"],
                [
                    sc.truth_runs_above(a, int(n), float(t), noise)
                    for a, n, t in zip(runs["arm"], runs["size"], runs["tau"], strict=True)
                ],
            )
        )
    return pd.concat(parts, ignore_index=True)


def summarise(rows: pd.DataFrame) -> dict[str, float]:
    """Coverage (overall and where the truth is finite), share of infinite truths, mean finite
    width, degenerate share and no-interval share of interval rows."""
    printed = rows["low"].notna() & rows["high"].notna()
    p = rows[printed]
    tol = 1e-9 * np.maximum(1.0, np.abs(p["truth"].where(np.isfinite(p["truth"]), 0.0)))
    inside = ((p["low"] <= p["truth"] + tol) & (p["truth"] - tol <= p["high"])) | (
        np.isinf(p["truth"]) & (p["high"] == p["truth"])
    )
    width = (p["high"] - p["low"]).to_numpy()
    finite = np.isfinite(p["truth"]).to_numpy()
    return {
        "coverage": float(inside.mean()) if len(p) else float("nan"),
        # sizes whose truth lies beyond the ladder (inf) are held by every interval reaching it:
        # the coverage where the truth is finite shows how the rest fare
        "finite_coverage": float(inside[finite].mean()) if finite.any() else float("nan"),
        "infinite_truth": float(np.mean(~finite)) if len(p) else float("nan"),
        "width": float(np.mean(width[np.isfinite(width)]))
        if np.isfinite(width).any()
        else float("nan"),
        "degenerate": float(np.mean(width == 0)) if len(p) else float("nan"),
        "no_interval": float(1 - printed.mean()) if len(rows) else float("nan"),
        "intervals": int(len(p)),
    }


def coverage_table(
    studies: int,
    *,
    seeds: tuple[int, ...] = (3, 5, 10),
    noises: tuple[str, ...] = ("normal", "lognormal", "two-mode"),
    resamples: int = 1000,
    scenario: Scenario | None = None,
    rng_seed: int = 2026,
    progress=None,  # type: ignore[no-untyped-def]
) -> pd.DataFrame:
    """Coverage of every printed quantity per (seeds, noise) over ``studies`` synthetic studies.

    Columns: quantity, seeds, noise, coverage, finite_coverage, infinite_truth, width, degenerate,
    no_interval, intervals, studies.
    """
    sc = scenario or default_scenario()
    rng = np.random.default_rng(rng_seed)
    out = []
    for n in seeds:
        for noise in noises:
            collected = []
            for i in range(studies):
                scores = simulate_scores(sc, n, noise, rng)
                settings = CurveSettings(resamples=resamples, seed=int(rng.integers(2**31)))
                collected.append(study_intervals(scores, sc, noise, settings))
                if progress is not None:
                    progress(n, noise, i)
            allrows = pd.concat(collected, ignore_index=True)
            for q in QUANTITIES:
                s = summarise(allrows[allrows["quantity"] == q])
                out.append({"quantity": q, "seeds": n, "noise": noise, **s, "studies": studies})
    return pd.DataFrame(out)
