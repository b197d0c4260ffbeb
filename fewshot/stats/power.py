"""How many seeds a comparison needs: Welch's t test power, from a pilot's spreads.

For a one-sided Welch test of arm > baseline with ``n`` seeds each, spreads ``s1`` and
``s2`` and a true difference ``effect``, the statistic is noncentral t with
Welch-Satterthwaite degrees of freedom
``df = (s1²/n + s2²/n)² / ((s1²/n)²/(n-1) + (s2²/n)²/(n-1))`` and noncentrality
``effect / sqrt(s1²/n + s2²/n)``. Power is computed as in Colas, Sigaud & Oudeyer (2018), "How
many random seeds? Statistical power analysis in deep reinforcement learning experiments",
treating the noncentral t as a central t shifted by the noncentrality:
``power = 1 - F_t(t(1-α, df) - ncp; df)``. For the Welch test this is closer to the truth than
the noncentral t at the true df (which ignores that Welch's df is itself estimated): at 5 seeds
and effect size 1 it gives 0.39, the noncentral t 0.42, and scipy's Welch test, simulated,
rejects 40% of the time (tests/test_transfer.py).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from fewshot.errors import InvalidInput

__all__ = ["welch_power", "seeds_needed", "seeds_table"]

MAX_SEEDS = 10_000


def welch_power(
    n: int | np.ndarray, effect: float, s1: float, s2: float, alpha: float = 0.05
) -> np.ndarray:
    """Power of the one-sided Welch t test with ``n`` seeds per arm."""
    n = np.asarray(n, dtype=float)
    v1, v2 = s1**2 / n, s2**2 / n
    se = np.sqrt(v1 + v2)
    with np.errstate(divide="ignore", invalid="ignore"):
        df = (v1 + v2) ** 2 / (v1**2 / (n - 1) + v2**2 / (n - 1))
        ncp = effect / se
    crit = stats.t.ppf(1 - alpha, df)
    return np.asarray(stats.t.sf(crit - ncp, df))


def seeds_needed(
    effect: float, s1: float, s2: float, *, power: float = 0.8, alpha: float = 0.05
) -> int | None:
    """The fewest seeds per arm whose power reaches ``power``; None beyond 10,000 seeds."""
    _iv(effect, power, alpha)
    if s1 == 0 and s2 == 0:
        return 2
    lo, hi = 2, 4
    while welch_power(hi, effect, s1, s2, alpha) < power:
        lo, hi = hi, hi * 2
        if hi > MAX_SEEDS:
            return None
    while lo < hi:  # power rises with n: bisect for the first n that reaches the target
        mid = (lo + hi) // 2
        if welch_power(mid, effect, s1, s2, alpha) >= power:
            hi = mid
        else:
            lo = mid + 1
    return int(lo)


def _iv(effect: float, power: float, alpha: float) -> None:
    if not effect > 0:
        raise InvalidInput(
            f"`effect` must be a positive difference (in the scores' units). Got {effect}."
        )
    if not 0 < power < 1:
        raise InvalidInput(f"`power` must lie between 0 and 1, e.g. 0.8. Got {power}.")
    if not 0 < alpha < 0.5:
        raise InvalidInput(f"`alpha` must lie between 0 and 0.5, e.g. 0.05. Got {alpha}.")


def seeds_table(
    scores: pd.DataFrame,
    baseline: str,
    *,
    effect: float,
    power: float = 0.8,
    alpha: float = 0.05,
    value: str = "normalised",
) -> pd.DataFrame:
    """Seeds each (arm, task, size) comparison with the baseline needs, from the pilot's spreads.

    Columns: arm, task, size, pilot_seeds, sd_arm, sd_baseline, power_now (with the pilot's seed
    count), seeds_needed (None: more than 10,000).
    """
    _iv(effect, power, alpha)
    level = scores.dropna(subset=[value]).groupby(["arm", "task", "size", "seed"])[value].mean()
    if baseline not in level.index.get_level_values("arm"):
        raise InvalidInput(f"baseline {baseline!r} has no scores in the pilot.")
    spread = level.groupby(["arm", "task", "size"]).agg(["std", "count"])
    base = spread.loc[baseline]
    rows = []
    for (arm, task, size), r in spread.iterrows():
        if arm == baseline or (task, size) not in base.index:
            continue
        b = base.loc[(task, size)]
        if r["count"] < 2 or b["count"] < 2:
            continue
        n_now = int(min(r["count"], b["count"]))
        rows.append(
            {
                "arm": arm,
                "task": task,
                "size": int(size),
                "pilot_seeds": n_now,
                "sd_arm": float(r["std"]),
                "sd_baseline": float(b["std"]),
                "power_now": float(welch_power(n_now, effect, r["std"], b["std"], alpha)),
                "seeds_needed": seeds_needed(effect, r["std"], b["std"], power=power, alpha=alpha),
            }
        )
    return pd.DataFrame(
        rows,
        columns=[
            "arm",
            "task",
            "size",
            "pilot_seeds",
            "sd_arm",
            "sd_baseline",
            "power_now",
            "seeds_needed",
        ],
    )
