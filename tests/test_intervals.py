"""Interval methods chosen by coverage, checked against analytic formulas and scipy."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from fewshot.stats.intervals import (
    newcombe_interval,
    newcombe_mean_interval,
    newcombe_variance,
    rescaled_strata,
    satterthwaite_df,
    stratified_mean_t,
    stratified_t,
)
from fewshot.stats.transfer import probability_of_improvement


def test_rescaled_stratified_bootstrap_variance_is_cochrans():
    # Cochran, Sampling Techniques (3rd ed., 1977), eq. 5.6 without finite-population correction:
    # V(ȳ_st) = sum_h W_h^2 s_h^2 / n_h. The naive stratified bootstrap gives sum W_h^2 s_h^2 (n_h-1)/n_h^2;
    # rescaling each stratum by sqrt(n_h / (n_h - 1)) recovers the unbiased formula in the limit.
    rng = np.random.default_rng(4)
    strata = [rng.normal(0, 1, 3), rng.normal(2, 3, 4), rng.normal(-1, 0.5, 3)]
    counts = np.array([len(x) for x in strata], float)
    w = counts / counts.sum()
    analytic = sum(w[h] ** 2 * np.var(x, ddof=1) / len(x) for h, x in enumerate(strata))
    b = 200_000
    idx = [rng.integers(0, len(x), size=(b, len(x))) for x in strata]
    means = rescaled_strata(strata, idx).mean(axis=1)  # pooled mean = stratified mean (W_h = n_h/N)
    assert np.var(means, ddof=1) == pytest.approx(analytic, rel=0.02)
    naive = np.concatenate([x[i] for x, i in zip(strata, idx, strict=True)], axis=1).mean(axis=1)
    assert np.var(naive, ddof=1) < 0.85 * analytic  # the uncorrected bootstrap is too narrow


def test_stratified_t_for_the_mean_is_the_closed_form():
    # With the rescaled bootstrap SE (large B) the interval is ȳ_st ± t(df) sqrt(V), df by Satterthwaite
    # (Cochran eq. 5.16: (sum g_h s_h^2)^2 / sum g_h^2 s_h^4 / (n_h - 1), g_h = W_h^2 / n_h).
    rng = np.random.default_rng(5)
    strata = [rng.normal(0, 1, 3), rng.normal(1, 2, 3), rng.normal(0, 1, 5)]
    counts = np.array([len(x) for x in strata], float)
    w = counts / counts.sum()
    s2 = np.array([np.var(x, ddof=1) for x in strata])
    g = w**2 / counts
    df = (g * s2).sum() ** 2 / ((g * s2) ** 2 / (counts - 1)).sum()
    assert satterthwaite_df(s2, counts, w) == pytest.approx(df)
    est = np.concatenate(strata).mean()
    draws = rescaled_strata(strata, [rng.integers(0, len(x), (200_000, len(x))) for x in strata])
    lo, hi, got_df = stratified_t(est, draws.mean(axis=1), strata, 0.95)
    half = stats.t.ppf(0.975, df) * np.sqrt((g * s2).sum())
    assert got_df == pytest.approx(df)
    assert (lo, hi) == pytest.approx((est - half, est + half), rel=0.02)


def test_stratified_t_needs_two_seeds_in_every_task():
    lo, hi, df = stratified_t(0.5, np.zeros(10), [np.array([1.0, 2.0]), np.array([3.0])], 0.95)
    assert np.isnan(lo) and np.isnan(hi) and np.isnan(df)


def test_newcombe_variance_at_one_half_is_the_null_variance_of_u():
    # At theta = 1/2 Newcombe's variance is (m + n + 1) / (12 m n), the null variance of U / (m n); so the
    # Wald z at 1/2 reproduces scipy's asymptotic Mann-Whitney p-value (no ties, no continuity correction).
    rng = np.random.default_rng(6)
    for m, n in ((3, 3), (5, 4), (10, 7)):
        x, y = rng.normal(0.3, 1, m), rng.normal(0, 1, n)
        ref = stats.mannwhitneyu(x, y, method="asymptotic", use_continuity=False)
        a = probability_of_improvement(x, y)
        assert a == pytest.approx(ref.statistic / (m * n))
        z = (a - 0.5) / np.sqrt(newcombe_variance(0.5, m, n))
        assert 2 * stats.norm.sf(abs(z)) == pytest.approx(ref.pvalue)


def test_newcombe_variance_is_hanley_mcneil_with_n_star():
    # Hanley & McNeil (1982): V = [A(1-A) + (m-1)(Q1 - A^2) + (n-1)(Q2 - A^2)] / (m n), Q1 = A/(2-A),
    # Q2 = 2A^2/(1+A); Newcombe (2006) method 5 puts N* = (m+n)/2 - 1 for m-1 and n-1.
    for a, m, n in ((0.7, 3, 3), (0.2, 5, 8), (0.95, 4, 6)):
        ns = (m + n) / 2 - 1
        hm = (a * (1 - a) + ns * (a / (2 - a) - a**2) + ns * (2 * a**2 / (1 + a) - a**2)) / (m * n)
        assert newcombe_variance(a, m, n) == pytest.approx(hm)


def test_newcombe_interval_solves_the_score_equation_and_is_never_a_point():
    z = stats.norm.ppf(0.975)
    for a, m, n in ((1.0, 3, 3), (0.0, 3, 3), (5 / 9, 3, 3), (0.8, 5, 5), (0.5, 10, 10)):
        lo, hi = newcombe_interval(np.array([a]), m, n, 0.95)
        f = lambda t, a=a, m=m, n=n: (a - t) ** 2 - z**2 * newcombe_variance(t, m, n)  # noqa: E731
        # brentq (scipy) on each side of the estimate finds the same crossings
        ref_lo = 0.0 if a == 0 else optimize.brentq(f, 1e-12, min(a, 1 - 1e-9))
        ref_hi = 1.0 if a == 1 else optimize.brentq(f, max(a, 1e-9), 1 - 1e-12)
        assert (lo[0], hi[0]) == pytest.approx((ref_lo, ref_hi), abs=1e-9)
        assert hi[0] - lo[0] > 0.1  # never degenerate, even when every run of one arm wins
    lo, hi = newcombe_interval(np.array([1.0]), 3, 3, 0.95)
    assert 0.5 < lo[0] < 1 and hi[0] == 1.0


def test_newcombe_mean_interval_narrows_with_tasks():
    one = newcombe_interval(np.array([0.8]), 3, 3, 0.95)
    four = np.full((1, 4), 0.8)
    lo, hi = newcombe_mean_interval(four, np.full((1, 4), 3), np.full((1, 4), 3), 0.95)
    assert lo[0] < 0.8 < hi[0] and hi[0] - lo[0] < one[1][0] - one[0][0]
    # rows with fewer tasks (NaN-padded) give the same as on their own
    two = np.array([[0.8, 0.6, np.nan], [0.8, 0.6, 0.7]])
    lo2, hi2 = newcombe_mean_interval(two, np.full((2, 3), 3), np.full((2, 3), 3), 0.95)
    ref = newcombe_mean_interval(
        np.array([[0.8, 0.6]]), np.full((1, 2), 3), np.full((1, 2), 3), 0.95
    )
    assert (lo2[0], hi2[0]) == pytest.approx((ref[0][0], ref[1][0]))


def test_stratified_mean_t_with_one_stratum_is_the_one_sample_t():
    x = np.array([0.3, 0.9, 0.4, 0.7])
    est, lo, hi = stratified_mean_t([x], np.array([1.0]), 0.95)
    ref = stats.t.interval(0.95, 3, loc=x.mean(), scale=stats.sem(x))  # scipy
    assert est == pytest.approx(x.mean()) and (lo, hi) == pytest.approx(ref)


def test_stratified_mean_t_equal_strata_use_the_pooled_df():
    # equal variances and sizes: Satterthwaite's df is the pooled T (n - 1) (Cochran eq. 5.16)
    strata = [np.array([0.0, 1.0, 2.0]) + k for k in range(3)]
    est, lo, hi = stratified_mean_t(strata, np.full(3, 1 / 3), 0.95)
    se = np.sqrt(3 * (1 / 9) * 1.0 / 3)
    assert (lo, hi) == pytest.approx(
        (est - stats.t.ppf(0.975, 6) * se, est + stats.t.ppf(0.975, 6) * se)
    )


def test_probability_of_improvement_is_brunner_munzels_relative_effect():
    # scipy.stats.brunnermunzel(x, y) standardises p = P(X < Y) + P(X = Y)/2, estimated from mid-ranks as
    # (mean rank of y in the pooled sample - (m+1)/2) / n (Brunner & Munzel 2000): its statistic is
    # W = n m (p - 1/2) / sqrt(n S_x^2 + m S_y^2) with the rank variances S below. Our P(X > Y) is 1 - p.
    rng = np.random.default_rng(8)
    for n, m in ((3, 3), (5, 4), (6, 9)):
        x, y = np.round(rng.normal(0.3, 1, n), 1), np.round(rng.normal(0, 1, m), 1)  # ties too
        pooled = stats.rankdata(np.concatenate([x, y]))
        rx, ry = pooled[:n], pooled[n:]
        sx = np.sum((rx - stats.rankdata(x) - rx.mean() + (n + 1) / 2) ** 2) / (n - 1)
        sy = np.sum((ry - stats.rankdata(y) - ry.mean() + (m + 1) / 2) ** 2) / (m - 1)
        if n * sx + m * sy == 0:
            continue
        p = 1 - probability_of_improvement(x, y)
        w = n * m * (p - 0.5) / np.sqrt(n * sx + m * sy)
        assert stats.brunnermunzel(x, y).statistic == pytest.approx(w)
