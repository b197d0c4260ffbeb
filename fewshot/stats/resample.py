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
from scipy import special, stats

from fewshot.stats.curves import CurveSettings

__all__ = ["CurveResampler", "nan_estimate", "expanded_level", "interval"]


def nan_estimate(name: str, x: np.ndarray) -> np.ndarray:
    """Estimator over the last axis that leaves out missing runs (NaN)."""
    if name == "mean":
        return np.nanmean(x, axis=-1)
    if name == "median":
        return np.nanmedian(x, axis=-1)
    if (
        name == "optimality_gap"
    ):  # Agarwal et al. (2021): mean shortfall below 1, missing runs left out
        return np.nanmean(np.maximum(0.0, 1.0 - x), axis=-1)
    s = np.sort(x, axis=-1)  # NaN last
    m = np.isfinite(s).sum(axis=-1)
    cut = (0.25 * m).astype(int)  # as scipy.stats.trim_mean(x, 0.25): int(0.25 n) from each end
    pos = np.arange(s.shape[-1])
    keep = (pos >= cut[..., None]) & (pos < (m - cut)[..., None])
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(keep, np.nan_to_num(s), 0.0).sum(axis=-1) / keep.sum(axis=-1)


def expanded_level(confidence: float, n: int) -> float:
    """Hesterberg's expanded percentile level α'/2 = Φ(√(n/(n-1)) · t(α/2, n-1)); α/2 for n < 2."""
    alpha = 1 - confidence
    if n < 2:
        return alpha / 2
    return float(special.ndtr(np.sqrt(n / (n - 1)) * stats.t.ppf(alpha / 2, n - 1)))


def interval(draws: np.ndarray, confidence: float, n: int) -> tuple[float, float]:
    """Expanded percentile interval of resampled values (inf allowed); NaN below 2 seeds."""
    if n < 2:
        return float("nan"), float("nan")
    a = expanded_level(confidence, n)
    kept = draws[~np.isnan(draws)]
    if kept.size == 0:
        return float("nan"), float("nan")
    # censored draws are +-inf: quantile them as the largest floats, then give the infinity back
    big = np.finfo(float).max
    lo, hi = np.quantile(np.clip(kept, -big, big), [a, 1 - a], method="linear")
    back = lambda v: float(np.inf if v >= big else -np.inf if v <= -big else v)  # noqa: E731
    return back(lo), back(hi)


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
        self.values: dict[tuple[str, str], pd.DataFrame] = {}
        for (arm, task), g in seed_level.groupby(level=["arm", "task"]):
            wide = g.droplevel(["arm", "task"]).unstack("seed").reindex(columns=self.seeds[task])
            self.values[(arm, task)] = wide  # sizes × seeds, NaN where a run is missing
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
        return self.values[(arm, task)].index.to_numpy()

    def matrix(self, arm: str, task: str, sizes: np.ndarray) -> np.ndarray:
        return self.values[(arm, task)].reindex(sizes).to_numpy(dtype=float)

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
