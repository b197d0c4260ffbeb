"""Whole-curve resampling: one matrix of resampled seeds per task, shared by every arm and size.

Quantities read across sizes (episodes to a threshold, effective data, area under the
curve) and comparisons of arms are computed on each resample from the same seeds, so
that the correlation nested subsets create between sizes, and the pairing of arms on
the same subsets, are kept. Intervals of such derived quantities are percentile
intervals at Hesterberg's (2015) expanded level for the number of seeds, which undoes
most of the percentile interval's narrowness at few seeds.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from fewshot.stats.cell_methods import expanded_half_alpha
from fewshot.stats.curves import CurveSettings
from fewshot.stats.estimators import nan_estimate

__all__ = ["CurveResampler", "nan_estimate", "expanded_level", "interval", "quantile_inf"]


def expanded_level(confidence: float, n: int) -> float:
    """Hesterberg's expanded percentile level α'/2 = Φ(√(n/(n-1)) · t(α/2, n-1)); α/2 for n < 2."""
    alpha = 1 - confidence
    if n < 2:
        return alpha / 2
    return expanded_half_alpha(alpha, n)


def interval(draws: np.ndarray, confidence: float, n: int) -> tuple[float, float]:
    """Expanded percentile interval of resampled values (inf allowed); NaN below 2 seeds."""
    if n < 2:
        return float("nan"), float("nan")
    a = expanded_level(confidence, n)
    kept = np.sort(draws[~np.isnan(draws)])
    if kept.size == 0:
        return float("nan"), float("nan")
    return quantile_inf(kept, a), quantile_inf(kept, 1 - a)


def quantile_inf(ordered: np.ndarray, q: float) -> float:
    """numpy's default (linear) quantile of sorted values that may hold +-inf (censored draws).

    Between two finite neighbours this is ``np.quantile(x, q)``. Next to an infinite neighbour the
    quantile is that infinity: a quantile between the last finite resample and the first one
    beyond the ladder is beyond the ladder too, never a number interpolated against the largest
    float. (Interpolating with an infinity by hand gives inf - inf = NaN at exact positions, which
    is why this is not left to numpy.)
    """
    m = len(ordered)
    pos = q * (m - 1)  # numpy's "linear" method (Hyndman & Fan type 7)
    k = int(np.floor(pos))
    frac = pos - k
    lo = float(ordered[k])
    if frac == 0 or k + 1 >= m:
        return lo
    hi = float(ordered[k + 1])
    if np.isinf(lo) or np.isinf(hi):
        if np.isinf(lo) and np.isinf(hi) and lo != hi:  # -inf next to +inf: the nearer one
            return lo if frac < 0.5 else hi
        return hi if np.isinf(hi) and hi > 0 else lo if np.isinf(lo) else hi
    return float(lo + (hi - lo) * frac) if frac < 0.5 else float(hi - (hi - lo) * (1 - frac))


class CurveResampler:
    """Seed-level values of every (arm, task, size) and their whole-curve resamples."""

    def __init__(self, scores: pd.DataFrame, value: str, settings: CurveSettings) -> None:
        self.settings = settings
        data = scores.dropna(subset=[value])
        seed_level = data.groupby(["arm", "task", "size", "seed"])[value].mean()
        self.seeds = {
            t: np.array(sorted(g.index.get_level_values("seed").unique()))
            for t, g in seed_level.groupby(level="task")
        }
        # one unstack for the whole study, then each (arm, task) block as arrays: sizes × seeds
        wide = seed_level.unstack("seed")
        col = {s: k for k, s in enumerate(wide.columns)}
        table = wide.to_numpy(dtype=float)
        all_sizes = wide.index.get_level_values("size").to_numpy()
        blocks = wide.groupby(level=["arm", "task"], sort=True).indices
        self.values: dict[tuple[str, str], tuple[np.ndarray, np.ndarray]] = {}
        for arm, task in sorted(blocks):
            rows = blocks[(arm, task)]
            order = rows[np.argsort(all_sizes[rows], kind="stable")]
            cols = [col[s] for s in self.seeds[task]]
            # sizes, and sizes × seeds with NaN where a run is missing
            self.values[(arm, task)] = (all_sizes[order], table[np.ix_(order, cols)])
        tasks = sorted(self.seeds)
        root = np.random.SeedSequence(settings.seed)
        self.index = {
            t: np.random.default_rng(child).integers(
                0, len(self.seeds[t]), size=(settings.resamples, len(self.seeds[t]))
            )
            for t, child in zip(tasks, root.spawn(len(tasks)), strict=True)
        }

    def has(self, arm: str, task: str) -> bool:
        return (arm, task) in self.values

    def sizes(self, arm: str, task: str) -> np.ndarray:
        return self.values[(arm, task)][0].copy()

    def matrix(self, arm: str, task: str, sizes: np.ndarray) -> np.ndarray:
        """Seed-level values at ``sizes`` (sizes × seeds), NaN rows for sizes never run."""
        own, table = self.values[(arm, task)]
        want = np.asarray(sizes)
        out = np.full((len(want), table.shape[1]), np.nan)
        if len(own) and len(want):
            pos = np.minimum(np.searchsorted(own, want), len(own) - 1)
            hit = own[pos] == want
            out[hit] = table[pos[hit]]
        return out

    def point(self, arm: str, task: str, sizes: np.ndarray) -> np.ndarray:
        """Estimates over seeds at ``sizes``."""
        return nan_estimate(self.settings.estimator, self.matrix(arm, task, sizes))

    def boot(self, arm: str, task: str, sizes: np.ndarray) -> np.ndarray:
        """Resampled estimates, resamples × sizes, from the task's shared seed index matrix."""
        m = self.matrix(arm, task, sizes)  # sizes × seeds
        gathered = m[:, self.index[task]]  # sizes × resamples × seeds
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # resamples that drew only missing runs
            return nan_estimate(self.settings.estimator, gathered).T

    def n_seeds(self, arm: str, task: str, sizes: np.ndarray) -> int:
        """The fewest seeds behind any of ``sizes`` for this arm and task."""
        m = self.matrix(arm, task, sizes)
        return int(np.isfinite(m).sum(axis=1).min()) if m.size else 0
