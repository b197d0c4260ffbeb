"""The block-wise, shared-buffer paths of the aggregates over tasks against the plain per-cell
computations they replace: the same numbers, bit for bit (issue 16: the same seeds give the
same intervals).

References named beside each check: numpy's own mean / median per row, scipy.stats.trim_mean
for the IQM (to rounding: it sums in another order), and the straightforward rescale-every-draw
gather of each stratum.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from fewshot.stats import CurveSettings, aggregate_curves
from fewshot.stats.aggregate import BLOCK, _resampled
from fewshot.stats.estimators import nan_estimate, nan_estimates
from fewshot.stats.intervals import (
    pooled_indices,
    rescaled_strata,
    strata_df,
    stratified_t,
    t_quantile,
)
from fewshot.stats.inversion import _column_moments, _covariance
from fewshot.stats.transfer import _paired_cells, _seed_cells

ALL = ("iqm", "mean", "median", "optimality_gap")


def _rescaled_every_draw(strata: list[np.ndarray], indices: list[np.ndarray]) -> np.ndarray:
    """Each stratum's drawn values rescaled by sqrt(n/(n-1)) about its mean, then joined."""
    parts = []
    for x, idx in zip(strata, indices, strict=True):
        n = int(np.isfinite(x).sum())
        centre = np.nanmean(x)
        parts.append(centre + np.sqrt(n / (n - 1)) * (x[idx] - centre))
    return np.concatenate(parts, axis=1)


def _plain_draws(
    strata: list[np.ndarray], counts: list[int], settings: CurveSettings
) -> np.ndarray:
    """The documented recipe's resamples: one index matrix per task (tasks in sorted order)
    from SeedSequence(seed).spawn, every draw rescaled."""
    children = np.random.SeedSequence(settings.seed).spawn(len(counts))
    indices = [
        np.random.default_rng(c).integers(0, n, size=(settings.resamples, n))
        for c, n in zip(children, counts, strict=True)
    ]
    return _rescaled_every_draw(strata, indices)


@pytest.mark.parametrize("order", [ALL, ("median", "iqm"), ("iqm",), ("optimality_gap", "iqm")])
def test_shared_estimates_equal_each_alone_and_numpy(order):
    rng = np.random.default_rng(21)
    x = np.round(rng.normal(0.6, 0.5, size=(300, 37)), 2)  # ties, as real scores have
    got = dict(zip(order, nan_estimates(order, x), strict=True))
    for name, values in got.items():
        # the one-estimator path, which reads its own sort, is the plain computation
        np.testing.assert_array_equal(values, nan_estimate(name, x))
    if "median" in got:  # numpy's median per row, after the IQM trimmed the shared sort
        np.testing.assert_array_equal(got["median"], np.median(x, axis=1))
    if "mean" in got:
        np.testing.assert_array_equal(got["mean"], np.mean(x, axis=1))
    if "optimality_gap" in got:  # Agarwal et al. (2021): mean of max(0, 1 - x)
        np.testing.assert_array_equal(got["optimality_gap"], np.mean(np.maximum(0, 1 - x), axis=1))
    for row, value in zip(x, got["iqm"], strict=True):  # scipy's 25% trimmed mean
        assert value == pytest.approx(stats.trim_mean(row, 0.25), rel=1e-12)


@pytest.mark.parametrize("gaps", [False, True])
def test_estimates_leave_their_input_alone_unless_told(gaps):
    x = np.random.default_rng(22).normal(size=(40, 9))
    if gaps:
        x[3, 4] = np.nan  # never overwritten: the masked paths read x as it is
    before = x.copy()
    kept = nan_estimates(ALL, x)
    np.testing.assert_array_equal(x, before)
    scratch = nan_estimates(ALL, x, overwrite=True)  # x may now be sorted in place
    for name, a, b in zip(ALL, kept, scratch, strict=True):
        np.testing.assert_array_equal(a, b)
        np.testing.assert_array_equal(b, nan_estimate(name, before))  # one at a time
    if gaps:
        np.testing.assert_array_equal(x, before)
    else:  # sorted in place (numpy's own sort of each row), the IQM's trimmed ends zeroed
        np.testing.assert_array_equal(x[:, 2:7], np.sort(before, axis=1)[:, 2:7])


@pytest.mark.parametrize("gaps", [False, True])
def test_blockwise_resamples_equal_the_whole_matrix(gaps):
    rng = np.random.default_rng(23)
    strata = [rng.normal(0.5, 0.3, size=n) for n in (3, 5, 4, 6)]
    if gaps:
        strata[1][2] = np.nan  # a missing run: out of its stratum's mean, NaN in every draw
    rows = 2 * BLOCK + 17  # two whole blocks and a part
    indices = [rng.integers(0, len(x), size=(rows, len(x))) for x in strata]
    pooled = pooled_indices(indices, [len(x) for x in strata])
    plain = _rescaled_every_draw(strata, indices)
    np.testing.assert_array_equal(rescaled_strata(strata, [], pooled), plain)
    np.testing.assert_array_equal(rescaled_strata(strata, indices), plain)
    blockwise = _resampled(ALL, strata, pooled)
    for name, values in zip(ALL, blockwise, strict=True):
        np.testing.assert_array_equal(values, nan_estimate(name, plain))
        if not gaps and name in ("mean", "median"):  # numpy's own, per resample
            np.testing.assert_array_equal(values, getattr(np, name)(plain, axis=1))


def _rows(
    rng: np.random.Generator,
    seeds: dict[str, int],
    arms: tuple[str, ...],
    missing: tuple[str, str, int] | None = None,
) -> list[dict]:
    """Runs at size 4 of ``arms`` over ``seeds`` (task -> seed count), a random normalised score
    each, leaving out the ``missing`` (arm, task, seed) run (drawn for no value)."""
    return [
        {
            "arm": arm,
            "role": "pretrained",
            "group": None,
            "task": t,
            "size": 4,
            "seed": k,
            "normalised": float(np.round(rng.normal(0.5, 0.3), 3)),
        }
        for arm in arms
        for t, n in seeds.items()
        for k in range(n)
        if (arm, t, k) != missing
    ]


def test_aggregate_interval_equals_a_plain_per_cell_computation():
    # one cell over three tasks, recomputed from the documented recipe: one index matrix per
    # task from SeedSequence(seed).spawn, every draw rescaled, scipy's trim_mean per resample
    seeds = {"t1": 4, "t2": 5, "t3": 3}
    rows = _rows(np.random.default_rng(24), seeds, ("a",))
    settings = CurveSettings(resamples=3 * BLOCK // 2, seed=5)
    got = aggregate_curves(pd.DataFrame(rows), settings).set_index("aggregate")
    strata = [np.array([r["normalised"] for r in rows if r["task"] == t]) for t in seeds]
    draws = _plain_draws(strata, list(seeds.values()), settings)
    pooled = np.concatenate(strata)
    theta = np.array([stats.trim_mean(d, 0.25) for d in draws])
    est = float(stats.trim_mean(pooled, 0.25))
    lo, hi, _ = stratified_t(est, theta, strata, settings.confidence, strata_df(strata))
    assert got.loc["iqm", "estimate"] == pytest.approx(est, rel=1e-12)
    assert got.loc["iqm", "low"] == pytest.approx(lo, rel=1e-9)
    assert got.loc["iqm", "high"] == pytest.approx(hi, rel=1e-9)
    # numpy's median per resample: exactly the interval reported
    theta = np.median(draws, axis=1)
    lo, hi, _ = stratified_t(np.median(pooled), theta, strata, settings.confidence)
    assert (got.loc["median", "low"], got.loc["median", "high"]) == (lo, hi)


def test_paired_cells_equal_pandas_grouping_and_intersection():
    # the one-pass split of the seed-level values against pandas' own grouping per (task, size)
    # and Index.intersection of the seeds, with seeds missing on either side
    rng = np.random.default_rng(25)
    rows = [
        {"arm": a, "task": t, "size": s, "seed": k, "score": float(rng.normal())}
        for a in ("base", "x", "y")
        for t in ("t1", "t2")
        for s in (0, 2, 8)
        for k in range(5)
        if not (a == "x" and t == "t2" and k in (1, 3))  # arm misses seeds
        and not (a == "base" and s == 8 and k == 0)  # baseline misses a seed
        and not (a == "y" and t == "t1" and s == 2)  # arm misses a whole cell
    ]
    level = pd.DataFrame(rows).groupby(["arm", "task", "size", "seed"])["score"].mean()
    cells = _seed_cells(level)
    for arm in ("x", "y"):
        got = list(_paired_cells(cells, arm, "base"))
        want = []
        b = level.loc["base"]
        for (task, size), g in level.loc[arm].groupby(level=["task", "size"]):
            x = g.droplevel(["task", "size"])
            y = b.loc[(task, size)]
            common = x.index.intersection(y.index)
            want.append((task, int(size), x.loc[common], y.loc[common], len(x), len(y)))
        assert [w[:2] for w in want] == [g[:2] for g in got]
        for (_, _, xs, ys, nx, ny), (_, _, wx, wy, mx, my) in zip(got, want, strict=True):
            np.testing.assert_array_equal(xs, wx.to_numpy())
            np.testing.assert_array_equal(ys, wy.to_numpy())
            assert (nx, ny) == (mx, my)


@pytest.mark.parametrize("seeds", [2, 3, 10, 17])
def test_column_moments_equal_numpy_per_column(seeds):
    # test inversion reads each ladder point's mean and variance and each segment's covariance
    # once; numpy's own mean, var and cov per column are the reference, bit for bit
    rng = np.random.default_rng(seeds)
    g = np.round(rng.normal(size=(seeds, 6)) * 10.0 ** rng.integers(-3, 4, size=6), 3)
    means, variances, centred = _column_moments(g)
    for j in range(g.shape[1]):
        assert means[j] == g[:, j].mean()
        assert variances[j] == np.var(g[:, j], ddof=1)
    for j in range(g.shape[1] - 1):
        assert _covariance(centred, j) == np.cov(g[:, j], g[:, j + 1], ddof=1)[0, 1]


def test_cached_t_quantile_equals_scipy():
    # scipy.stats.t.ppf is the reference; the cache must hand back its value, not a neighbour's
    for df in (1, 2, 4, 9, 29):
        for p in (0.9, 0.95, 0.975, 0.995):
            assert t_quantile(p, df) == float(stats.t.ppf(p, df))
            assert t_quantile(p, df) == float(stats.t.ppf(p, df))  # again, from the cache


def test_aggregate_with_a_missing_seed_equals_a_plain_per_cell_computation():
    # arm "a" lacks seed 2 of task t2 (arm "b" has it, so t2 has 5 seeds): the documented recipe
    # with pandas' reindex over each task's seeds as the reference placement, numpy's nanmedian
    # per resample (exact) and scipy's trim_mean of the present runs (to rounding)
    seeds = {"t1": 4, "t2": 5, "t3": 3}
    rows = _rows(np.random.default_rng(26), seeds, ("a", "b"), missing=("a", "t2", 2))
    scores = pd.DataFrame(rows)
    settings = CurveSettings(resamples=BLOCK + 100, seed=8)
    got = aggregate_curves(scores, settings)
    got = got[got["arm"] == "a"].set_index("aggregate")
    assert "t2: 1 seed(s) missing" in got.loc["median", "note"]
    mine = scores[scores["arm"] == "a"].set_index(["task", "seed"])["normalised"]
    strata = [mine.loc[t].reindex(range(n)).to_numpy() for t, n in seeds.items()]
    draws = _plain_draws(strata, list(seeds.values()), settings)
    pooled = np.concatenate(strata)
    theta = np.nanmedian(draws, axis=1)
    lo, hi, _ = stratified_t(np.nanmedian(pooled), theta, strata, settings.confidence)
    assert (got.loc["median", "low"], got.loc["median", "high"]) == (lo, hi)
    theta = np.array([stats.trim_mean(d[np.isfinite(d)], 0.25) for d in draws])
    est = float(stats.trim_mean(pooled[np.isfinite(pooled)], 0.25))
    lo, hi, _ = stratified_t(est, theta, strata, settings.confidence)
    assert got.loc["iqm", "estimate"] == pytest.approx(est, rel=1e-12)
    assert (got.loc["iqm", "low"], got.loc["iqm", "high"]) == pytest.approx((lo, hi), rel=1e-9)
