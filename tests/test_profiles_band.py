"""The performance profile's band: the stratified score interval of a fraction of runs above τ.

References: scipy.stats.binomtest's Wilson interval (one task), Newcombe (1998, Stat Med 17:857,
Table I, score method; values quoted from memory, and they agree with scipy to 4 places), a
brute-force inversion whose restricted maximum likelihood is found by scipy.optimize (several
tasks), and the exact coverage summed over every outcome with scipy.stats.binom's pmf.
"""

from __future__ import annotations

import itertools
import re

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, special, stats

from fewshot.errors import InvalidInput
from fewshot.stats import CurveSettings
from fewshot.stats.profiles import performance_profile, stratified_score


@pytest.mark.parametrize("n", [1, 2, 3, 5, 9, 20, 263])
def test_one_task_is_wilsons_interval_as_scipy_computes_it(n):
    for k in sorted({0, 1, n // 3, n // 2, n - 1, n}):
        low, high = stratified_score(np.array([[k]]), np.array([[n]]))
        want = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
        assert low[0] == pytest.approx(want.low, abs=1e-9) and high[0] == pytest.approx(
            want.high, abs=1e-9
        ), (k, n)


def test_newcombes_worked_examples():
    # Newcombe (1998) Table I, method 3 (score, no continuity correction); from memory
    cases = {
        (81, 263): (0.2553, 0.3662),
        (15, 148): (0.0624, 0.1605),
        (0, 20): (0.0, 0.1611),
        (1, 29): (0.0061, 0.1718),
    }
    k = np.array([[c[0]] for c in cases])
    n = np.array([[c[1]] for c in cases])
    low, high = stratified_score(k, n)
    for i, (lo, hi) in enumerate(cases.values()):
        assert (round(low[i], 4), round(high[i], 4)) == (lo, hi)


def _brute_force(k: np.ndarray, n: np.ndarray, step: float = 0.001) -> tuple[float, float]:
    """Every θ on a grid whose score statistic, at the likelihood's maximum under the restriction
    Σ n_t p_t / N = θ found by scipy.optimize (SLSQP), stays below z²."""
    total, p_hat = n.sum(), k.sum() / n.sum()

    def neg_loglik(p: np.ndarray) -> float:
        return -float(np.sum(special.xlogy(k, p) + special.xlogy(n - k, 1 - p)))

    accepted = []
    for theta in np.arange(step, 1, step):
        res = optimize.minimize(
            neg_loglik,
            np.full(len(k), theta),
            method="SLSQP",
            bounds=[(1e-12, 1 - 1e-12)] * len(k),
            constraints=[{"type": "eq", "fun": lambda p, t=theta: n @ p / total - t}],
            options={"ftol": 1e-12, "maxiter": 500},
        )
        var = float(n @ (res.x * (1 - res.x))) / total**2
        if (p_hat - theta) ** 2 <= stats.norm.ppf(0.975) ** 2 * var:
            accepted.append(theta)
    return min(accepted), max(accepted)


@pytest.mark.parametrize(
    ("k", "n"),
    [
        ([0, 3, 3], [3, 3, 3]),
        ([2, 1, 3], [3, 3, 3]),
        ([4, 0, 5, 1], [5, 4, 5, 3]),
        ([1, 9], [2, 10]),
    ],
)
def test_several_tasks_against_a_brute_force_inversion(k, n):
    k, n = np.array(k, dtype=float), np.array(n, dtype=float)
    low, high = stratified_score(k[None, :], n[None, :])
    want_low, want_high = _brute_force(k, n)
    # the grid's step (0.001) bounds the brute force's error
    assert low[0] == pytest.approx(want_low, abs=0.0015)
    assert high[0] == pytest.approx(want_high, abs=0.0015)


def _exact_coverage(p: np.ndarray, n: int) -> float:
    """P(interval holds the mean of p), summed over every outcome of len(p) tasks of n runs."""
    outcomes = np.array(list(itertools.product(range(n + 1), repeat=len(p))))
    low, high = stratified_score(outcomes, np.full_like(outcomes, n))
    prob = np.prod([stats.binom.pmf(outcomes[:, t], n, p[t]) for t in range(len(p))], axis=0)
    truth = float(np.mean(p))
    return float(prob[(low <= truth) & (truth <= high)].sum())


def test_exact_coverage_is_near_nominal_over_three_tasks():
    rng = np.random.default_rng(8)
    for n, (lo, hi) in {3: (0.94, 0.98), 5: (0.935, 0.97), 10: (0.93, 0.96)}.items():
        cover = [_exact_coverage(rng.random(3), n) for _ in range(40)]
        # averaged over tasks' proportions drawn uniformly: near 95% (a bootstrap percentile
        # interval of the same fraction averaged 60-80% in the harness)
        assert lo <= np.mean(cover) <= hi, (n, np.mean(cover))
        assert min(cover) >= 0.85, (n, min(cover))
    # tasks that differ widely: their spread is no uncertainty, and the interval knows it
    assert _exact_coverage(np.array([0.05, 0.5, 0.95]), 10) < 0.96


def test_profile_over_runs_counts_every_run_and_bands_them():
    rng = np.random.default_rng(4)
    rows = [
        {"arm": a, "task": t, "size": s, "seed": k, "normalised": float(rng.normal(0.6, 0.4))}
        for a in ("x", "y")
        for t in ("t1", "t2", "t3")
        for s in (1, 8)
        for k in range(5)
        if not (t == "t2" and k == 4 and a == "y")  # a missing run
    ]
    scores = pd.DataFrame(rows)
    taus = np.array([0.9, 0.1, 0.5, 0.5, 1.2])  # unsorted, tied
    got = performance_profile(scores, CurveSettings(resamples=100), taus=taus)
    assert len(got) == 2 * 2 * len(taus) and not got["low"].isna().any()
    for (arm, size), g in scores.groupby(["arm", "size"]):
        mine = got[(got["arm"] == arm) & (got["size"] == size)]
        # counts by the plain broadcast comparison, task by task
        counts = np.array(
            [(x["normalised"].to_numpy()[:, None] > taus).sum(axis=0) for _, x in g.groupby("task")]
        )
        runs = g.groupby("task").size().to_numpy()
        np.testing.assert_allclose(mine["fraction"], counts.sum(axis=0) / runs.sum())
        low, high = stratified_score(counts.T, np.tile(runs, (len(taus), 1)))
        np.testing.assert_allclose(mine["low"], low)
        np.testing.assert_allclose(mine["high"], high)
        assert (mine["n_seeds"] == runs.min()).all() and (mine["note"] == "").all()


def test_no_band_below_two_seeds_and_none_over_tasks():
    one = pd.DataFrame(
        {"arm": "x", "task": ["a", "b", "b"], "size": 4, "seed": [0, 0, 1], "normalised": 0.5}
    )
    got = performance_profile(one, CurveSettings(resamples=100), taus=np.array([0.4]))
    assert got["fraction"].tolist() == [1.0] and got["low"].isna().all()
    tasks = performance_profile(
        one, CurveSettings(resamples=100), taus=np.array([0.4]), over="tasks"
    )
    assert tasks["low"].isna().all() and tasks["high"].isna().all()


def test_the_band_is_never_a_single_value():
    # every run above τ in every task: the estimate is 1, the interval Wilson's for N runs (the
    # old percentile band was [1, 1] here)
    frame = pd.DataFrame(
        {
            "arm": "x",
            "task": np.repeat(["a", "b", "c"], 3),
            "size": 10,
            "seed": np.tile([0, 1, 2], 3),
            "normalised": 0.9,
        }
    )
    got = performance_profile(frame, CurveSettings(resamples=100), taus=np.array([0.5, 1.0]))
    high_tau, low_tau = got.set_index("tau").loc[1.0], got.set_index("tau").loc[0.5]
    assert low_tau["low"] == pytest.approx(9 / (9 + stats.norm.ppf(0.975) ** 2))
    assert high_tau["high"] == pytest.approx(
        stats.norm.ppf(0.975) ** 2 / (9 + stats.norm.ppf(0.975) ** 2)
    )


@pytest.mark.parametrize(
    ("k", "n", "confidence", "fragment"),
    [
        ([[1, 2]], [[3, 3]], 95, "`confidence` must lie between 0 and 1"),
        ([[5]], [[3]], 0.95, "0 <= `k` <= `n`"),
        ([[0, 0]], [[0, 0]], 0.95, "at least one run"),
        ([1, 2], [3, 3], 0.95, "cases × strata"),
        ([[1, 2]], [[3, 3, 3]], 0.95, "cases × strata"),
    ],
)
def test_bad_counts_are_refused_with_a_message(k, n, confidence, fragment):
    with pytest.raises(InvalidInput, match=re.escape(fragment)):
        stratified_score(np.array(k), np.array(n), confidence)
