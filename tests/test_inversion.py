"""Test inversion over sizes, against a brute-force grid and exact cases."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from fewshot.stats.inversion import level_crossing_set, seed_t_interval

SIZES = np.array([1.0, 3.0, 10.0, 30.0, 100.0])


def brute_force(curve, level, sizes, confidence, points=20_001):
    """Accept every log size on a fine grid where scipy's one-sample t test of the interpolated
    per-seed differences does not reject zero; add the regions beyond the ladder by scipy's
    one-sided test at its ends (monotone curve: only one direction can reject there)."""
    x = np.log(sizes)
    grid = np.linspace(x[0], x[-1], points)
    g = curve - level[:, None]
    per_seed = np.stack([np.interp(grid, x, row) for row in g])  # seeds × grid
    p = stats.ttest_1samp(per_seed, 0.0, axis=0).pvalue
    kept = grid[p >= 1 - confidence]
    # beyond the ends the test rejects in one direction only: scipy's one-sided t test
    below_kept = stats.ttest_1samp(g[:, 0], 0.0, alternative="less").pvalue >= 1 - confidence
    above_kept = stats.ttest_1samp(g[:, -1], 0.0, alternative="greater").pvalue >= 1 - confidence
    low = 0.0 if below_kept else (np.exp(kept.min()) if kept.size else sizes[-1])
    high = np.inf if above_kept else (np.exp(kept.max()) if kept.size else sizes[0])
    return low, high, (grid[1] - grid[0])


@pytest.mark.parametrize("seed", range(12))
def test_closed_form_matches_a_brute_force_grid(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(3, 8))
    base = 0.9 * (1 - np.exp(-SIZES / rng.uniform(3, 60)))
    curve = (
        base[None, :] + rng.normal(0, rng.uniform(0.02, 0.2), (n, 1)) + rng.normal(0, 0.05, (n, 5))
    )
    level = rng.uniform(0.0, 1.0) + rng.normal(0, 0.05, n)
    lo, hi = level_crossing_set(curve, level, SIZES, 0.95)
    ref_lo, ref_hi, step = brute_force(curve, level, SIZES, 0.95)
    for got, ref in ((lo, ref_lo), (hi, ref_hi)):
        if np.isinf(ref) or ref == 0:
            assert got == ref
        else:  # within one grid step on the log axis
            assert abs(np.log(got) - np.log(ref)) <= 1.5 * step


def test_without_spread_the_set_is_the_exact_crossing():
    # every seed identical: log-linear curve y = ln(D) / ln(100) crosses 0.5 at D = 10 exactly
    curve = np.tile(np.log(SIZES) / np.log(100), (4, 1))
    lo, hi = level_crossing_set(curve, np.full(4, 0.5), SIZES, 0.95)
    assert lo == pytest.approx(10.0) and hi == pytest.approx(10.0)


def test_censoring_beyond_and_below_the_ladder():
    rng = np.random.default_rng(1)
    flat = 0.5 + rng.normal(0, 0.01, (5, 5))
    lo, hi = level_crossing_set(
        flat, np.full(5, 2.0), SIZES, 0.95
    )  # far below the level everywhere
    assert lo == SIZES[-1] and np.isinf(hi)
    lo, hi = level_crossing_set(flat, np.full(5, -1.0), SIZES, 0.95)  # far above it everywhere
    assert lo == 0.0 and hi == SIZES[0]
    noisy = 0.5 + rng.normal(0, 1.0, (3, 5))  # no evidence either way: the whole axis
    lo, hi = level_crossing_set(noisy, np.full(3, 0.5), SIZES, 0.95)
    assert lo == 0.0 and np.isinf(hi)


def test_seed_t_interval_is_scipys():
    v = np.array([0.2, 0.5, 0.4, 0.9])
    ref = stats.t.interval(0.95, 3, loc=v.mean(), scale=stats.sem(v))  # scipy
    assert seed_t_interval(v, 0.95) == pytest.approx(ref)
    assert all(np.isnan(seed_t_interval(np.array([1.0]), 0.95)))
