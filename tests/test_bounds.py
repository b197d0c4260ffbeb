"""Infinite bounds stay infinite, huge scores keep finite intervals, and both display sanely."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from fewshot.analysis.shapes import json_records as records
from fewshot.stats import CurveSettings, bootstrap_cells
from fewshot.stats.intervals import stratified_mean_t
from fewshot.stats.inversion import level_crossing_set, seed_t_interval
from fewshot.stats.resample import expanded_level, interval, quantile_inf
from fewshot.stats.transfer import effective_data, paired_differences
from fewshot.tables import effective_cell, latex_table, number, transfer_rows


def test_quantiles_of_finite_draws_are_numpys():
    rng = np.random.default_rng(0)
    for _ in range(50):
        x = np.sort(rng.normal(size=rng.integers(2, 40)))
        for q in (0.0, 0.013, 0.025, 0.5, 0.975, 0.99, 1.0):
            assert quantile_inf(x, q) == np.quantile(x, q)  # numpy's default (linear) rule


def test_a_quantile_next_to_an_infinite_draw_is_infinite():
    x = np.sort(np.r_[np.arange(97.0), [np.inf] * 3])
    # numpy's linear position of q = 0.975 among 100 values is 96.525: between the last finite
    # value (96) and the first infinite one; on finite stand-ins numpy gives a number beyond 96
    pos = 0.975 * 99
    assert 96 < pos < 97
    assert quantile_inf(x, 0.975) == math.inf
    assert quantile_inf(x, 96 / 99) == 96.0  # exactly on the last finite value: that value
    low = np.sort(np.r_[[-np.inf] * 3, np.arange(97.0)])
    assert quantile_inf(low, 0.025) == -math.inf
    lo, hi = interval(x, 0.95, 5)
    a = expanded_level(0.95, 5)
    assert lo == np.quantile(x[:97], a * 99 / 96)  # both quantiles against numpy's linear rule
    assert hi == math.inf


def test_effective_data_bounds_are_sizes_or_infinite():
    # a study where, at size 10, the arm may be beyond the baseline's best point (found by search;
    # a bootstrap quantile between the last finite and the first infinite draw once printed
    # 8.4e306 here): the high end is a size of the ladder or infinite (test inversion)
    rng = np.random.default_rng(0)
    rows = []
    for size in (1, 3, 10, 30):
        for seed in range(5):
            b = np.log(size) + rng.normal(0, 0.4)
            for arm, v in (("scratch", b), ("wide", b + 0.35 + rng.normal(0, 0.4))):
                rows.append(
                    dict(arm=arm, role="x", task="t", group=None, size=size, seed=seed, value=v)
                )
    frame = pd.DataFrame(rows)
    eff = effective_data(frame, "scratch", CurveSettings(resamples=1000), value="value")
    highs = eff["effective_high"].to_numpy()
    assert np.isinf(highs).any()  # the case of the issue is present
    assert (np.isinf(highs) | (highs <= 30)).all()  # never ~3.4e307


def test_scores_near_1e200_keep_finite_t_intervals():
    x = np.array([[1.0, 2.5, 3.1, 4.2, 2.2]])
    big = x * 1e200
    for method in ("t", "hall", "bootstrap-t", "bca", "percentile"):
        res = bootstrap_cells(
            big, lambda v: v.mean(-1), method=method, rng=np.random.default_rng(0), is_mean=True
        )
        small = bootstrap_cells(
            x, lambda v: v.mean(-1), method=method, rng=np.random.default_rng(0), is_mean=True
        )
        assert np.isfinite([res.low[0], res.high[0], res.se[0]]).all(), method
        assert res.low[0] == pytest.approx(small.low[0] * 1e200, rel=1e-12), method
        assert res.high[0] == pytest.approx(small.high[0] * 1e200, rel=1e-12), method
    # scipy: Student's t interval of the scaled values, scaled back
    lo, hi = stats.t.interval(0.95, 4, loc=x.mean(), scale=stats.sem(x[0]))
    res = bootstrap_cells(big, lambda v: v.mean(-1), rng=np.random.default_rng(0), is_mean=True)
    assert (res.low[0], res.high[0]) == pytest.approx((lo * 1e200, hi * 1e200), rel=1e-12)
    med = bootstrap_cells(big, lambda v: np.median(v, -1), rng=np.random.default_rng(0))
    assert np.isfinite([med.low[0], med.high[0]]).all()  # bootstrap SE scaled too


def test_paired_differences_near_1e200_are_finite():
    rows = []
    for size in (1, 3):
        for seed, (a, b) in enumerate([(3.0, 1.0), (2.5, 1.2), (4.0, 0.5), (3.3, 1.1)]):
            for arm, v in (("wide", a), ("scratch", b)):
                rows.append(
                    dict(arm=arm, role="x", task="t", group=None, size=size, seed=seed, v=v * 1e200)
                )
    frame = pd.DataFrame(rows)
    for est in ("mean", "median", "iqm"):
        d = paired_differences(frame, "scratch", CurveSettings(est, resamples=500), value="v")
        assert np.isfinite(d[["difference", "low", "high"]].to_numpy()).all(), est


def test_new_t_intervals_near_1e200_are_the_scaled_ones():
    # issue 11's intervals (areas, stratified t over tasks, test inversion) on scores near 1e200:
    # finite, and the intervals of the unscaled values scaled (they are scale-equivariant)
    x = np.array([1.0, 2.5, 3.1, 4.2, 2.2])
    lo, hi = seed_t_interval(x * 1e200, 0.95)
    ref = stats.t.interval(0.95, 4, loc=x.mean(), scale=stats.sem(x))  # scipy
    assert (lo, hi) == pytest.approx((ref[0] * 1e200, ref[1] * 1e200), rel=1e-12)
    strata = [x, x[:3] + 1.0]
    small = stratified_mean_t(strata, np.array([0.5, 0.5]), 0.95)
    big = stratified_mean_t([v * 1e200 for v in strata], np.array([0.5, 0.5]), 0.95)
    assert np.isfinite(big).all()
    assert big == pytest.approx(tuple(v * 1e200 for v in small), rel=1e-12)
    curve = np.array([[0.0, 1.0, 2.1], [0.2, 1.3, 1.9], [-0.1, 0.8, 2.3]])
    level = np.array([1.0, 1.2, 0.9])
    sizes = np.array([1.0, 3.0, 10.0])
    small_set = level_crossing_set(curve, level, sizes, 0.95)
    big_set = level_crossing_set(curve * 1e200, level * 1e200, sizes, 0.95)
    assert big_set == pytest.approx(small_set, rel=1e-9)
    assert small_set[0] < small_set[1]  # the case holds an interval, not a failure


def test_means_over_tasks_near_1e200_are_finite():
    rows = []
    for task in ("t", "u"):
        for size in (1, 3):
            for seed, (a, b) in enumerate([(3.0, 1.0), (2.5, 1.2), (4.0, 0.5), (3.3, 1.1)]):
                for arm, v in (("wide", a), ("scratch", b)):
                    rows.append(
                        dict(
                            arm=arm,
                            role="x",
                            task=task,
                            group=None,
                            size=size,
                            seed=seed,
                            v=v * 1e200,
                        )
                    )
    frame = pd.DataFrame(rows)
    d = paired_differences(frame, "scratch", CurveSettings("mean", resamples=500), value="v")
    every = d[d["task"] == "all"]
    assert len(every) == 2 and (every["method"] == "stratified t").all()
    assert np.isfinite(every[["difference", "low", "high"]].to_numpy()).all()


def test_numbers_never_print_every_digit():
    assert number(3.4e307) == "3.4e+307"
    assert number(123456.0) == "123456"
    assert number(math.inf) == "inf"


def _eff_row(**kw):
    base = dict(
        arm="wide",
        task="t",
        size=3,
        difference=0.1,
        low=0.0,
        high=0.2,
        probability=0.8,
        p_low=0.6,
        p_high=1.0,
        p_seeds=5,
        effective=30.0,
        multiplier=10.0,
        effective_low=12.0,
        effective_high=math.inf,
        censor="lower_bound",
        mark="",  # ">=" only when the whole interval lies beyond the ladder (fewshot.stats.labels)
        label="helps",
        hurts=False,
        n_seeds=5,
    )
    base.update(kw)
    return pd.Series(base)


def test_infinite_bounds_read_beyond_ladder_in_every_display():
    row = _eff_row()
    assert effective_cell(row) == "30 (x10) [12, beyond ladder] helps"
    beyond = _eff_row(effective_low=30.0, mark=">=")
    assert effective_cell(beyond) == ">=30 (x10) [30, beyond ladder] helps"
    tex = latex_table(transfer_rows(pd.DataFrame([row])), "c")
    assert "beyond ladder" in tex and "e+307" not in tex


def test_json_writes_infinity_as_a_string_and_missing_as_null():
    frame = pd.DataFrame({"a": [1.5, math.inf, -math.inf, np.nan], "b": ["x", "y", None, "z"]})
    got = records(frame)
    assert [r["a"] for r in got] == [1.5, "inf", "-inf", None]
    assert got[2]["b"] is None


def test_cells_under_three_seeds_are_flagged():
    rows = transfer_rows(pd.DataFrame([_eff_row(n_seeds=2, p_seeds=2), _eff_row()]))
    assert rows[0]["difference"].endswith(" !") and rows[0]["effective data"].endswith(" !")
    assert rows[0]["P(improvement)"].endswith(" !")
    assert not rows[1]["difference"].endswith("!")
