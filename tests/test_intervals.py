"""Interval methods chosen by coverage, checked against analytic formulas and scipy."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from fewshot.stats.intervals import (
    mover_mean_interval,
    newcombe_interval,
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


def _accepted_by_the_score_test(a, m, n, theta, confidence=0.95):
    """Brute force with scipy.stats.norm: does the score test of P = theta keep the estimate a?
    Two-sided p-value, or one-sided where the other tail holds no attainable estimate (0 or 1
    is not rejected on that side at the two-sided level)."""
    z2 = stats.norm.ppf(0.5 + confidence / 2)
    sd = np.sqrt(newcombe_variance(theta, m, n))
    z = (a - theta) / sd
    top_empty = (1 - theta) / sd <= z2  # not even an estimate of 1 is too high
    bottom_empty = theta / sd <= z2  # not even 0 is too low
    one_sided = np.where(z < 0, top_empty & ~bottom_empty, bottom_empty & ~top_empty)
    p = np.where(one_sided, stats.norm.sf(np.abs(z)), 2 * stats.norm.sf(np.abs(z)))
    return p >= 1 - confidence


def test_newcombe_interval_is_the_set_the_score_test_keeps():
    # every attainable estimate (U / mn in steps of 1 / 2mn) for 2-8 runs per arm: the interval's
    # ends are the ends of the brute-force accepted set on a fine grid, which is one interval
    grid = np.linspace(0, 1, 200_001)[1:-1]
    for m, n in ((2, 2), (3, 3), (5, 5), (4, 7), (8, 8)):
        a = np.arange(2 * m * n + 1) / (2 * m * n)
        lo, hi = newcombe_interval(a, np.full(len(a), m), np.full(len(a), n), 0.95)
        for k in range(len(a)):
            kept = grid[_accepted_by_the_score_test(a[k], m, n, grid)]
            ref_lo = 0.0 if a[k] == 0 or kept.min() <= grid[0] else kept.min()
            ref_hi = 1.0 if a[k] == 1 or kept.max() >= grid[-1] else kept.max()
            assert (lo[k], hi[k]) == pytest.approx((ref_lo, ref_hi), abs=2e-5)
            inner = (grid >= kept.min()) & (grid <= kept.max())
            assert len(kept) == inner.sum()  # the accepted set has no holes
            assert hi[k] - lo[k] > 0.1  # never degenerate, even when every run of one arm wins


def test_newcombe_interval_away_from_the_bounds_solves_the_score_equation():
    z = stats.norm.ppf(0.975)
    for a, m, n in ((0.5, 10, 10), (0.4, 12, 9), (0.6, 20, 20), (0.45, 15, 15)):
        lo, hi = newcombe_interval(np.array([a]), m, n, 0.95)
        f = lambda t, a=a, m=m, n=n: (a - t) ** 2 - z**2 * newcombe_variance(t, m, n)  # noqa: E731
        # both tails can reject at these ends: brentq (scipy) on the two-sided score equation
        ref_lo = optimize.brentq(f, 1e-12, a)
        ref_hi = optimize.brentq(f, a, 1 - 1e-12)
        assert (lo[0], hi[0]) == pytest.approx((ref_lo, ref_hi), abs=1e-9)
    # an estimate of 1: the upper end is 1 and the lower end the two-sided root (both tails live)
    lo, hi = newcombe_interval(np.array([1.0]), 3, 3, 0.95)
    f = lambda t: (1 - t) ** 2 - z**2 * newcombe_variance(t, 3, 3)  # noqa: E731
    assert hi[0] == 1.0 and lo[0] == pytest.approx(optimize.brentq(f, 1e-9, 1 - 1e-9), abs=1e-9)


@pytest.mark.parametrize(
    "x1, n1, x2, n2, low, high",
    [
        # Newcombe (1998), "Interval estimation for the difference between independent proportions:
        # comparison of eleven methods", Statistics in Medicine 17:873-890, Table II, method 10
        # (square-and-add of Wilson intervals); values quoted from memory of that table, to 4 places
        (56, 70, 48, 80, 0.0524, 0.3339),
        (9, 10, 3, 10, 0.1705, 0.8090),
        (6, 7, 2, 7, 0.0582, 0.8062),
        (5, 56, 0, 29, -0.0381, 0.1926),
        (0, 10, 0, 20, -0.1611, 0.2775),
        (10, 10, 0, 20, 0.6791, 1.0000),
    ],
)
def test_mover_reproduces_newcombes_square_and_add(x1, n1, x2, n2, low, high):
    # the difference p1 - p2 is twice the mean of p1 and -p2; each part's interval is Wilson's (scipy)
    a = stats.binomtest(x1, n1).proportion_ci(0.95, method="wilson")
    b = stats.binomtest(x2, n2).proportion_ci(0.95, method="wilson")
    p1, p2 = x1 / n1, x2 / n2
    lo, hi = mover_mean_interval(
        np.array([[p1, -p2]]), np.array([[a.low, -b.high]]), np.array([[a.high, -b.low]])
    )
    assert (2 * lo[0], 2 * hi[0]) == pytest.approx((low, high), abs=6e-5)


def test_mover_mean_interval_pads_and_refuses_parts_without_interval():
    one = newcombe_interval(np.array([0.8]), 3, 3, 0.95)
    four = np.full((1, 4), 0.8)
    lo, hi = mover_mean_interval(four, np.full((1, 4), one[0][0]), np.full((1, 4), one[1][0]))
    # four equal independent parts: half the width of one (sqrt(4) / 4), same skew
    assert (0.8 - lo[0], hi[0] - 0.8) == pytest.approx(
        ((0.8 - one[0][0]) / 2, (one[1][0] - 0.8) / 2)
    )
    # rows with fewer parts (NaN-padded) give the same as on their own
    est = np.array([[0.8, 0.6, np.nan], [0.8, 0.6, 0.7]])
    low, high = est - 0.2, np.minimum(est + 0.1, 1)
    lo2, hi2 = mover_mean_interval(est, low, high)
    ref = mover_mean_interval(est[:1, :2], low[:1, :2], high[:1, :2])
    assert (lo2[0], hi2[0]) == pytest.approx((ref[0][0], ref[1][0]))
    low[1, 2] = np.nan  # a present part with no interval: no interval for its mean
    lo3, hi3 = mover_mean_interval(est, low, high)
    assert np.isnan(lo3[1]) and np.isnan(hi3[1]) and np.isfinite(lo3[0])


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


@pytest.mark.parametrize("theta", [0.5, 0.8, 0.95, 0.99])
def test_newcombe_interval_covers_near_nominal_at_five_runs(theta):
    # independent normal runs shifted by delta: P(X > Y) = Phi(delta / sqrt 2) (scipy.stats.norm);
    # 4000 studies of 5 runs a side (Monte Carlo error about 0.35 points). Measured: 92-95% over
    # theta in 0.5-0.99 (the equal-tailed interval: 94-97%); U takes few values at 5 runs, so the
    # coverage jumps with theta, and the bounds are loose accordingly
    rng = np.random.default_rng(int(theta * 1000))
    delta = np.sqrt(2) * stats.norm.ppf(theta)
    x, y = rng.normal(delta, 1, (4000, 5)), rng.normal(0, 1, (4000, 5))
    a = probability_of_improvement(x, y)
    lo, hi = newcombe_interval(a, np.full(4000, 5), np.full(4000, 5), 0.95)
    coverage = np.mean((lo <= theta) & (theta <= hi))
    assert 0.91 <= coverage <= 0.975, coverage
