"""The bootstrap engine against scipy, R's boot and textbook values."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

from fewshot.errors import InvalidInput
from fewshot.stats.bootstrap import METHODS, DegenerateCells, bootstrap_cells
from fewshot.stats.estimators import ESTIMATORS, iqm

MEAN = ESTIMATORS["mean"]
# scipy's own regression data for bootstrap, with values from R's boot package
# (scipy/stats/tests/test_resampling.py, "test_bootstrap_against_R").
R_X = np.array([10, 12, 12.5, 12.5, 13.9, 15, 21, 22, 23, 34, 50, 81, 89, 121, 134, 213])
R_BOOT = {"basic": (23.77, 79.12), "percentile": (28.86, 84.21), "bca": (32.31, 91.43)}


@pytest.mark.parametrize("method", ["percentile", "basic", "bca"])
def test_same_draws_as_scipy_give_the_same_interval(method):
    # scipy.stats.bootstrap draws rng.integers(0, n, (batch, n)) as we do: with the same
    # generator state the two intervals agree to rounding.
    ours = bootstrap_cells(
        R_X[None, :],
        MEAN,
        method=method,
        resamples=5000,
        rng=np.random.default_rng(3),
        is_mean=True,
    )
    ref = stats.bootstrap(
        (R_X,), np.mean, method=method, n_resamples=5000, rng=np.random.default_rng(3)
    )
    assert ours.low[0] == pytest.approx(ref.confidence_interval.low, rel=1e-9)
    assert ours.high[0] == pytest.approx(ref.confidence_interval.high, rel=1e-9)
    assert ours.se[0] == pytest.approx(ref.standard_error, rel=1e-9)


@pytest.mark.parametrize("method", ["percentile", "basic", "bca"])
@pytest.mark.parametrize("estimator", ["mean", "median", "iqm"])
def test_independent_draws_agree_with_scipy_within_monte_carlo_error(method, estimator):
    # Our engine (one draw for all cells) against scipy.stats.bootstrap run cell by cell with other
    # seeds: the gap must be of the size of scipy's own gap between two of its runs (Monte Carlo error).
    data = np.random.default_rng(11).lognormal(0, 0.7, size=(8, 8))
    f = ESTIMATORS[estimator]

    def scipy_ci(row, seed):
        ci = stats.bootstrap(
            (row,),
            lambda x, axis=-1: f(np.moveaxis(x, axis, -1)),
            method=method,
            n_resamples=20000,
            rng=np.random.default_rng(seed),
        ).confidence_interval
        return np.array([ci.low, ci.high])

    ours = bootstrap_cells(data, f, method=method, resamples=20000, rng=np.random.default_rng(1))
    ours_ci = np.stack([ours.low, ours.high], axis=1)
    ref_a = np.stack([scipy_ci(row, 100 + i) for i, row in enumerate(data)])
    ref_b = np.stack([scipy_ci(row, 200 + i) for i, row in enumerate(data)])
    gap_ours = np.abs(ours_ci - ref_a).mean()
    gap_scipy = np.abs(ref_b - ref_a).mean()
    width = (ref_a[:, 1] - ref_a[:, 0]).mean()
    assert gap_ours <= 2.0 * gap_scipy + 0.005 * width


@pytest.mark.parametrize("method", ["basic", "percentile", "bca"])
def test_r_boot_values_within_one_percent(method):
    res = bootstrap_cells(
        R_X[None, :],
        MEAN,
        method=method,
        resamples=100_000,
        rng=np.random.default_rng(0),
        is_mean=True,
    )
    low, high = R_BOOT[method]
    assert res.low[0] == pytest.approx(low, rel=0.01)
    assert res.high[0] == pytest.approx(high, rel=0.01)


def test_t_interval_is_scipys_t_interval():
    ours = bootstrap_cells(
        R_X[None, :], MEAN, method="t", resamples=200, rng=np.random.default_rng(0), is_mean=True
    )
    ref = stats.t.interval(0.95, len(R_X) - 1, loc=R_X.mean(), scale=stats.sem(R_X))
    assert (ours.low[0], ours.high[0]) == pytest.approx(ref, rel=1e-12)


def test_expanded_percentile_is_a_percentile_of_the_same_distribution():
    # Hesterberg (2015): the percentile interval at alpha' = 2 Phi(sqrt(n/(n-1)) t_{alpha/2,n-1}).
    n = len(R_X)
    ref = stats.bootstrap((R_X,), np.mean, n_resamples=5000, rng=np.random.default_rng(4))
    alpha2 = stats.norm.cdf(np.sqrt(n / (n - 1)) * stats.t.ppf(0.025, n - 1))
    expected = np.percentile(ref.bootstrap_distribution, [100 * alpha2, 100 * (1 - alpha2)])
    ours = bootstrap_cells(
        R_X[None, :],
        MEAN,
        method="expanded",
        resamples=5000,
        rng=np.random.default_rng(4),
        is_mean=True,
    )
    assert (ours.low[0], ours.high[0]) == pytest.approx(tuple(expected), rel=1e-9)


def test_law_school_correlation_standard_error():
    # Efron & Tibshirani (1993), "An Introduction to the Bootstrap", law school data (15 schools):
    # correlation 0.776; the book's Table 6.1 (quoted from memory) gives bootstrap standard errors
    # between 0.132 and 0.151 for 25 to 3200 resamples.
    lsat = np.array(
        [576, 635, 558, 578, 666, 580, 555, 661, 651, 605, 653, 575, 545, 572, 594], float
    )
    gpa = np.array(
        [3.39, 3.30, 2.81, 3.03, 3.44, 3.07, 3.00, 3.43, 3.36, 3.13, 3.12, 2.74, 2.76, 2.88, 2.96]
    )
    assert np.corrcoef(lsat, gpa)[0, 1] == pytest.approx(0.776, abs=0.0005)

    def corr(idx: np.ndarray) -> np.ndarray:  # the "values" are school indices; resample them
        i = idx.astype(int)
        x, y = lsat[i], gpa[i]
        xc, yc = x - x.mean(-1, keepdims=True), y - y.mean(-1, keepdims=True)
        return (xc * yc).sum(-1) / np.sqrt((xc**2).sum(-1) * (yc**2).sum(-1))

    res = bootstrap_cells(
        np.arange(15.0)[None, :],
        corr,
        method="percentile",
        resamples=20000,
        rng=np.random.default_rng(5),
    )
    assert res.estimate[0] == pytest.approx(0.776, abs=0.0005)
    assert 0.12 < res.se[0] < 0.15


def test_iqm_matches_scipy_trim_mean_and_the_textbook_example():
    x = np.array([5, 8, 4, 38, 8, 6, 9, 7, 7, 3, 1, 6], float)
    assert iqm(x) == pytest.approx(6.5)  # textbook example: IQM 6.5 against a mean of 8.5
    assert MEAN(x) == pytest.approx(8.5)
    rng = np.random.default_rng(0)
    for n in (4, 5, 7, 12, 33):
        y = rng.normal(size=(3, n))
        assert np.allclose(iqm(y), stats.trim_mean(y, 0.25, axis=-1))


def test_cells_move_together():
    # one index matrix for all cells: a cell shifted by 5 has its whole bootstrap distribution shifted by 5
    x = np.random.default_rng(2).normal(size=7)
    res = bootstrap_cells(
        np.stack([x, x + 5]),
        MEAN,
        method="percentile",
        resamples=1000,
        rng=np.random.default_rng(0),
        keep_distribution=True,
    )
    assert np.allclose(res.distribution[1] - res.distribution[0], 5)


def test_two_level_resampling_with_replicates():
    rng = np.random.default_rng(8)
    seeds = rng.normal(0, 2, size=(1, 6, 1))
    values = seeds + rng.normal(0, 1, size=(1, 6, 4))  # 6 seeds x 4 replicates
    res = bootstrap_cells(
        values, MEAN, method="percentile", resamples=4000, rng=np.random.default_rng(1)
    )
    assert res.replicates == 4 and res.n == 6
    assert res.estimate[0] == pytest.approx(values.mean())
    # resampling replicates too makes the interval at least as wide as resampling seed means alone
    flat = bootstrap_cells(
        values.mean(axis=2), MEAN, method="percentile", resamples=4000, rng=np.random.default_rng(1)
    )
    assert res.high[0] - res.low[0] >= 0.95 * (flat.high[0] - flat.low[0])


def test_one_seed_gives_no_interval_and_degenerate_cells_warn():
    one = bootstrap_cells(
        np.array([[3.0]]), MEAN, resamples=200, rng=np.random.default_rng(0), is_mean=True
    )
    assert one.estimate[0] == 3.0 and np.isnan(one.low[0]) and np.isnan(one.high[0])
    same = np.array([[2.0, 2.0, 2.0], [1.0, 2.0, 3.0]])
    for method in METHODS:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            res = bootstrap_cells(
                same, MEAN, method=method, resamples=500, rng=np.random.default_rng(0), is_mean=True
            )
        assert any(issubclass(w.category, DegenerateCells) for w in caught), method
        if method == "bca":
            assert np.isnan(res.low[0]) and np.isnan(res.high[0])  # scipy gives NaN here too
        else:
            assert res.low[0] == res.high[0] == 2.0, method
        assert np.isfinite(res.low[1]) and res.low[1] < 2 < res.high[1], method


@pytest.mark.parametrize(
    ("kwargs", "fragment"),
    [
        ({"method": "wild"}, "`method` must be one of"),
        ({"confidence": 1.5}, "`confidence` must lie between 0 and 1"),
        ({"resamples": 10}, "at least 100"),
        ({"method": "bootstrap-t", "is_mean": False}, "mean only"),
    ],
)
def test_bad_engine_arguments(kwargs, fragment):
    args = {"resamples": 1000, "rng": np.random.default_rng(0), **kwargs}
    with pytest.raises(InvalidInput, match=fragment):
        bootstrap_cells(np.ones((1, 3)), MEAN, **args)


def test_non_finite_values_are_refused():
    with pytest.raises(InvalidInput, match="finite"):
        bootstrap_cells(
            np.array([[1.0, np.nan, 2.0]]), MEAN, resamples=100, rng=np.random.default_rng(0)
        )


def test_coverage_at_few_seeds_matches_the_known_shortfall_of_percentile():
    # Percentile intervals undercover at 5 seeds (about 83% for a normal mean, as measured with
    # scipy's bootstrap); the t interval holds 95% (Student's t is exact for normal data).
    rng = np.random.default_rng(21)
    data = rng.normal(size=(3000, 5))
    pct = bootstrap_cells(data, MEAN, method="percentile", resamples=1000, rng=rng, is_mean=True)
    t = bootstrap_cells(data, MEAN, method="t", resamples=200, rng=rng, is_mean=True)
    cover = lambda r: np.mean((r.low <= 0) & (0 <= r.high))  # noqa: E731
    assert 0.80 < cover(pct) < 0.87
    assert 0.935 < cover(t) < 0.965
