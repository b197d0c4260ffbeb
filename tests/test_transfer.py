"""Transfer against baselines, checked against scipy, scikit-learn and exact answers."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.isotonic import IsotonicRegression

from fewshot.errors import InvalidInput
from fewshot.stats import CurveSettings
from fewshot.stats.isotonic import isotonic_rows
from fewshot.stats.power import seeds_needed, seeds_table, welch_power
from fewshot.stats.profiles import NO_TASK_INTERVAL, performance_profile, scaling_view
from fewshot.stats.transfer import (
    curve_areas,
    effective_data,
    paired_differences,
    probability_of_improvement,
    probability_of_improvement_table,
    threshold_sizes,
)

SIZES = (1, 3, 10, 30, 100, 1000)


def curves_frame(
    law, arms=("wide", "scratch"), tasks=("a",), sizes=SIZES, seeds=5, noise=0.0, seed=0
):
    """Scores from ``law(arm, size)`` plus optional noise; normalised = score."""
    rng = np.random.default_rng(seed)
    rows = []
    for arm in arms:
        for task in tasks:
            for size in sizes:
                for s in range(seeds):
                    v = law(arm, size) + (rng.normal(0, noise) if noise else 0.0)
                    rows.append(
                        {
                            "arm": arm,
                            "role": "baseline" if arm == "scratch" else "pretrained",
                            "task": task,
                            "group": None,
                            "size": size,
                            "seed": s,
                            "replicate": 0,
                            "score": v,
                            "normalised": v,
                        }
                    )
    return pd.DataFrame(rows)


def test_probability_of_improvement_is_the_mann_whitney_u():
    rng = np.random.default_rng(0)
    for _ in range(20):
        x, y = rng.integers(0, 5, size=7).astype(float), rng.integers(0, 5, size=4).astype(float)
        u = stats.mannwhitneyu(x, y).statistic  # scipy: U counts ties as one half
        assert probability_of_improvement(x, y) == pytest.approx(u / (len(x) * len(y)))
    same = np.array([1.0, 2.0, 3.0])
    assert probability_of_improvement(same, same) == 0.5


def test_probability_of_improvement_on_the_precipice_example():
    # Agarwal et al. (2021): x = [[1,2],[2,2],[1,1],[2,1]] against y = [[1,1],[2,2],[3,3]] (runs x tasks)
    # gives 1/3, averaged over the two tasks.
    x = np.array([[1, 2], [2, 2], [1, 1], [2, 1]], float)
    y = np.array([[1, 1], [2, 2], [3, 3]], float)
    per_task = [probability_of_improvement(x[:, t], y[:, t]) for t in range(2)]
    assert np.mean(per_task) == pytest.approx(1 / 3)
    rows = []
    for arm, m in (("x", x), ("y", y)):
        for run in range(len(m)):
            for t in range(2):
                rows.append(
                    {
                        "arm": arm,
                        "role": "pretrained",
                        "task": f"t{t}",
                        "group": None,
                        "size": 1,
                        "seed": run,
                        "replicate": 0,
                        "score": m[run, t],
                    }
                )
    table = probability_of_improvement_table(pd.DataFrame(rows), "y", CurveSettings(resamples=500))
    assert table[table["task"] == "all"]["probability"].iloc[0] == pytest.approx(1 / 3)


def test_isotonic_fit_equals_scikit_learn():
    rng = np.random.default_rng(1)
    y = rng.normal(size=(300, 7)) + np.linspace(0, 1, 7)
    ref = np.stack(
        [IsotonicRegression().fit_transform(np.arange(7), row) for row in y]
    )  # scikit-learn
    assert np.allclose(isotonic_rows(y), ref)


def test_paired_interval_agrees_with_scipys_paired_bootstrap():
    frame = curves_frame(
        lambda arm, n: np.log(n) + (1.0 if arm == "wide" else 0.0), sizes=(10,), seeds=8, noise=0.5
    )
    ours = paired_differences(frame, "scratch", CurveSettings(method="percentile", resamples=20000))
    a = frame[frame.arm == "wide"].sort_values("seed")["score"].to_numpy()
    b = frame[frame.arm == "scratch"].sort_values("seed")["score"].to_numpy()
    ref = stats.bootstrap(
        (a, b),
        lambda x, y, axis=-1: np.mean(x, axis=axis) - np.mean(y, axis=axis),
        paired=True,
        method="percentile",
        n_resamples=20000,
        rng=np.random.default_rng(5),
    )
    row = ours.iloc[0]
    assert row["difference"] == pytest.approx(a.mean() - b.mean())
    tol = 0.1 * ref.standard_error  # Monte Carlo error of the interval ends
    assert abs(row["low"] - ref.confidence_interval.low) < tol
    assert abs(row["high"] - ref.confidence_interval.high) < tol


def test_paired_difference_t_interval_is_the_paired_t():
    frame = curves_frame(
        lambda arm, n: 2.0 if arm == "wide" else 1.0, sizes=(3,), seeds=6, noise=0.3
    )
    row = paired_differences(frame, "scratch", CurveSettings(method="t", resamples=200)).iloc[0]
    a = frame[frame.arm == "wide"].sort_values("seed")["score"].to_numpy()
    b = frame[frame.arm == "scratch"].sort_values("seed")["score"].to_numpy()
    d = a - b
    ref = stats.t.interval(0.95, len(d) - 1, loc=d.mean(), scale=stats.sem(d))  # scipy: paired t
    assert (row["low"], row["high"]) == pytest.approx(ref)


def test_effective_data_on_a_law_with_an_exact_answer():
    # Baseline score y_b(D) = 0.1 + 0.15 ln D; the arm scores y_a(n) = 0.1 + 0.15 ln(k n) with k = 3.7.
    # Setting y_b(D) = y_a(n) gives D = k n exactly: D_E = 3.7 n, D_T = 2.7 n, multiplier 3.7. The baseline is
    # linear in ln D, so interpolation on log size between ladder points is exact too (and the isotonic
    # fit of an increasing curve is the curve). Beyond the baseline's largest size (3.7 n > 1000) the
    # answer is only a lower bound.
    k = 3.7
    frame = curves_frame(lambda arm, n: 0.1 + 0.15 * np.log(n * (k if arm == "wide" else 1.0)))
    table = effective_data(frame, "scratch", CurveSettings(resamples=200)).set_index("size")
    for n in (1, 3, 10, 30, 100):
        assert table.loc[n, "effective"] == pytest.approx(k * n)
        assert table.loc[n, "transferred"] == pytest.approx((k - 1) * n)
        assert table.loc[n, "multiplier"] == pytest.approx(k)
        assert table.loc[n, "censor"] == ""
    assert table.loc[1000, "censor"] == "lower_bound" and table.loc[1000, "effective"] == 1000


def test_pretraining_that_hurts_is_kept_negative():
    frame = curves_frame(lambda arm, n: 0.1 + 0.15 * np.log(n * (0.5 if arm == "wide" else 1.0)))
    table = effective_data(frame, "scratch", CurveSettings(resamples=200)).set_index("size")
    assert table.loc[10, "transferred"] == pytest.approx(-5.0) and table.loc[10, "hurts"]
    assert table.loc[1, "censor"] == "upper_bound"  # below the baseline's smallest point


def test_episodes_to_threshold_interpolate_on_log_size_and_censor():
    # y = log10(n) / 3 reaches 0.5 at n = 10^1.5 exactly (linear in log size between 10 and 100).
    frame = curves_frame(
        lambda arm, n: np.log10(n) / 3 if n else 0.0, arms=("wide",), sizes=(0, 1, 10, 100, 1000)
    )
    half = threshold_sizes(frame, 0.5, CurveSettings(resamples=200)).iloc[0]
    assert half["episodes"] == pytest.approx(10**1.5) and half["censor"] == ""
    never = threshold_sizes(frame, 1.2, CurveSettings(resamples=200)).iloc[0]
    assert never["censor"] == "not_reached" and np.isinf(never["episodes"])
    zero = threshold_sizes(frame, 0.0, CurveSettings(resamples=200)).iloc[0]
    assert zero["censor"] == "zero-shot" and zero["episodes"] == 0
    no_zero = frame[frame["size"] > 0]
    first = threshold_sizes(no_zero, 0.0, CurveSettings(resamples=200)).iloc[0]
    assert first["censor"] == "at_most" and first["episodes"] == 1


def test_area_under_a_log_linear_curve_is_its_mid_height():
    # y = a + b ln n over [1, 1000]: the mean height on a log axis is a + b (ln 1 + ln 1000) / 2.
    frame = curves_frame(lambda arm, n: 0.2 + 0.05 * np.log(n), arms=("wide",))
    auc = curve_areas(frame, CurveSettings(resamples=200)).iloc[0]["auc"]
    assert auc == pytest.approx(0.2 + 0.05 * np.log(1000) / 2)


def test_welch_seeds_needed_and_power():
    # Equal spreads, effect size 1, one-sided alpha 0.05, power 0.8: about 14 seeds per arm (as in the
    # issue, after Colas et al. 2018).
    assert seeds_needed(1.0, 1.0, 1.0, power=0.8, alpha=0.05) == 14
    # Power at 5 seeds is about 0.39 (the value, computed with scipy's t distribution as
    # 1 - t.cdf(t_crit - ncp, df) with df = 8 and ncp = 1 / sqrt(2/5)).
    power5 = float(welch_power(5, 1.0, 1.0, 1.0))
    df, ncp = 8, 1 / np.sqrt(2 / 5)
    assert power5 == pytest.approx(1 - stats.t.cdf(stats.t.ppf(0.95, df) - ncp, df))
    assert power5 == pytest.approx(0.39, abs=0.01)
    # The real Welch test, simulated with scipy.stats.ttest_ind, rejects about as often (0.40); the
    # noncentral t at the true df would say 0.42 (scipy.stats.nct), further from the truth.
    rng = np.random.default_rng(3)
    x, y = rng.normal(1.0, 1.0, (40000, 5)), rng.normal(0.0, 1.0, (40000, 5))
    rejections = stats.ttest_ind(x, y, axis=1, equal_var=False, alternative="greater").pvalue < 0.05
    noncentral = stats.nct.sf(stats.t.ppf(0.95, df), df, ncp)
    assert abs(rejections.mean() - power5) < abs(rejections.mean() - noncentral)
    assert rejections.mean() == pytest.approx(power5, abs=0.02)


def test_seeds_table_from_a_pilot():
    frame = curves_frame(lambda arm, n: 0.5, sizes=(10,), seeds=6, noise=0.1)
    table = seeds_table(frame, "scratch", effect=0.1, value="score")
    assert table["pilot_seeds"].tolist() == [6] and table["seeds_needed"].iloc[0] > 6
    with pytest.raises(InvalidInput, match="^`effect` must be"):
        seeds_table(frame, "scratch", effect=0, value="score")


def test_performance_profile_and_headline():
    frame = curves_frame(
        lambda arm, n: {"wide": 0.9, "scratch": 0.4}[arm], tasks=("a", "b", "c"), sizes=(10,)
    )
    prof = performance_profile(
        frame, CurveSettings(resamples=200), taus=np.array([0.5]), over="tasks"
    )
    got = prof.set_index("arm")["fraction"]
    assert got["wide"] == 1.0 and got["scratch"] == 0.0
    # a fraction of tasks is printed without an interval, and says why
    assert prof["low"].isna().all() and prof["high"].isna().all()
    assert (prof["note"] == NO_TASK_INTERVAL).all()
    runs = performance_profile(frame, CurveSettings(resamples=200), taus=np.array([0.0, 0.5, 1.0]))
    wide = runs[runs.arm == "wide"].set_index("tau")["fraction"]
    assert wide[0.0] == 1.0 and wide[0.5] == 1.0 and wide[1.0] == 0.0


def _iqm_rows() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "arm": ["a", "b"],
            "role": ["pretrained"] * 2,
            "group": [None, None],
            "size": [10, 10],
            "aggregate": ["iqm", "iqm"],
            "estimate": [0.5, 0.7],
            "low": [0.4, 0.6],
            "high": [0.6, 0.8],
        }
    )


def test_scaling_view_uses_the_shared_attribute():
    agg = _iqm_rows()
    arms = pd.DataFrame({"arm": ["a", "b"], "role": ["pretrained"] * 2, "params": [1e6, 1e8]})
    view = scaling_view(agg, arms)
    assert view["attribute"].iloc[0] == "params" and view["attribute_value"].tolist() == [1e6, 1e8]
    with pytest.raises(InvalidInput, match="not a number carried by two arms"):
        scaling_view(agg, arms, "depth")


def test_scaling_view_takes_an_attribute_named_like_an_aggregate_column():
    arms = pd.DataFrame({"arm": ["a", "b"], "role": ["pretrained"] * 2, "estimate": [1e6, 1e8]})
    view = scaling_view(_iqm_rows(), arms, "estimate")
    assert view["attribute_value"].tolist() == [1e6, 1e8]
    assert view["estimate"].tolist() == [0.5, 0.7]  # the scores, not the attribute


@pytest.mark.parametrize(
    ("call", "fragment"),
    [
        (lambda f, s: paired_differences(f, "nobody", s), "baseline 'nobody' has no scores"),
        (
            lambda f, s: paired_differences(f, "scratch", s, arms=["ghost"]),
            "arm 'ghost' has no scores",
        ),
    ],
)
def test_bad_comparisons(call, fragment):
    frame = curves_frame(lambda arm, n: np.log(n))
    with pytest.raises(InvalidInput, match=fragment):
        call(frame, CurveSettings(resamples=200))
