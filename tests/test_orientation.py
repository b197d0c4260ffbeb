"""Lower-is-better metrics and partial references: one orientation rule, checked by the mirror
property and against scikit-learn, scipy and numpy."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import optimize, stats
from sklearn.isotonic import IsotonicRegression

from fewshot.analysis import compare_scores, curve_scores, score_tables, seeds_report
from fewshot.errors import InvalidInput
from fewshot.stats import CurveSettings
from fewshot.tables import transfer_rows

FAST = CurveSettings(resamples=200)


def results_frame(values: dict[tuple[str, str, int, int], float], metric: str) -> pd.DataFrame:
    """A results table as :meth:`Ledger.results` gives it, one final result per run."""
    rows = [
        {
            "run": f"{arm}/{task}/n{size}/s{seed}",
            "arm": arm,
            "role": "baseline" if arm == "scratch" else "pretrained",
            "task": task,
            "group": None,
            "size": size,
            "seed": seed,
            "replicate": 0,
            "metric": metric,
            "step": np.nan,
            "value": v,
        }
        for (arm, task, size, seed), v in values.items()
    ]
    return pd.DataFrame(rows)


def tasks_frame(refs: dict[str, tuple[float, float] | None]) -> pd.DataFrame:
    return pd.DataFrame(
        [
            {"task": t, "floor": r[0] if r else np.nan, "expert": r[1] if r else np.nan}
            for t, r in refs.items()
        ]
    )


def mirrored(values, refs, c):
    """The same study with a loss ``c - score`` (c = 0: the score negated); floor and expert
    swap sides, so the normalised scores are the same."""
    loss = {k: c - v for k, v in values.items()}
    mrefs = {t: (c - r[0], c - r[1]) if r else None for t, r in refs.items()}
    return loss, mrefs


def study(values, refs, *, metric="return", hib=True):
    return score_tables(
        results_frame(values, metric), tasks_frame(refs), metric=metric, higher_is_better=hib
    )


# --------------------------------------------------------------------------- the mirror property


@st.composite
def studies(draw):
    c = draw(st.sampled_from([0.0, 256.0]))
    n_tasks = draw(st.integers(1, 3))
    refs: dict[str, tuple[float, float] | None] = {}
    for k in range(n_tasks):
        # c != 0 shifts raw values, which float rounding does not keep exactly: there every task
        # has references (the normalised scores are then bit-for-bit the same); c == 0 (the
        # metric negated) is exact, so tasks may lack references
        has = c != 0 or draw(st.booleans())
        floor = draw(st.integers(0, 20))
        refs[f"t{k}"] = (float(floor), float(floor + draw(st.integers(10, 60)))) if has else None
    sizes = draw(st.sampled_from([(1, 3, 10), (0, 1, 3, 10), (1, 3, 10, 30)]))
    seeds = draw(st.integers(2, 5))
    arms = draw(st.sampled_from([("wide", "scratch"), ("wide", "narrow", "scratch")]))
    values = {}
    for arm in arms:
        for task in refs:
            for size in sizes:
                for seed in range(seeds):
                    if draw(st.integers(0, 19)) == 0 and seed > 0:
                        continue  # a missing run now and then
                    values[(arm, task, size, seed)] = draw(st.integers(0, 320)) / 4  # exact
    estimator = draw(st.sampled_from(["mean", "median", "iqm"]))
    return values, refs, c, estimator


def _same(a: pd.DataFrame, b: pd.DataFrame, cols) -> None:
    for col in cols:
        np.testing.assert_allclose(
            a[col].to_numpy(float), b[col].to_numpy(float), rtol=1e-12, atol=1e-12, err_msg=col
        )


@settings(
    max_examples=30,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)
@given(case=studies())
def test_a_study_and_its_lower_is_better_mirror_give_the_same_numbers(case):
    values, refs, c, estimator = case
    s = CurveSettings(estimator=estimator, resamples=200)
    loss, mrefs = mirrored(values, refs, c)
    up = study(values, refs)
    down = study(loss, mrefs, metric="loss", hib=False)
    has_refs = any(refs.values())
    # curves: identical in normalised units; in raw units the mirror's are c - the original's
    if has_refs:
        a, b = (curve_scores(x, s, normalised=True).table for x in (up, down))
        _same(a, b, ["estimate", "low", "high", "n_seeds"])
        a, b = (curve_scores(x, s, across_tasks=True).table for x in (up, down))
        _same(a, b, ["estimate", "low", "high"])
    a, b = (curve_scores(x, s).table for x in (up, down))
    np.testing.assert_allclose(b["estimate"], c - a["estimate"], rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(b["low"], c - a["high"], rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(b["high"], c - a["low"], rtol=1e-9, atol=1e-9)
    # the comparison: numbers, intervals and labels
    normed = up.scores["normalised"].dropna()
    threshold = float(normed.median()) if len(normed) else 1.0
    x, y = (compare_scores(z, s, baseline="scratch", threshold=threshold) for z in (up, down))
    raw = (x.table["unit"] != "normalised").to_numpy()
    same = [
        "probability",
        "p_low",
        "p_high",
        "effective",
        "effective_low",
        "effective_high",
        "transferred",
        "transferred_low",
        "transferred_high",
        "multiplier",
        "multiplier_low",
        "multiplier_high",
    ]
    _same(x.table, y.table, same)
    for col in ("difference", "arm_estimate"):
        want = np.where(raw, -x.table[col], x.table[col])  # raw rows are in the metric's units
        np.testing.assert_allclose(y.table[col], want, rtol=1e-12, atol=1e-12, err_msg=col)
    np.testing.assert_allclose(y.table["low"], np.where(raw, -x.table["high"], x.table["low"]))
    np.testing.assert_allclose(y.table["high"], np.where(raw, -x.table["low"], x.table["high"]))
    # the evidence words (issue 11's labels) follow the intervals, so they mirror too
    for col in ("censor", "mark", "label", "hurts", "method", "task", "size", "n_seeds", "p_seeds"):
        assert x.table[col].fillna("").tolist() == y.table[col].fillna("").tolist(), col
    xr, yr = transfer_rows(x.table), transfer_rows(y.table)
    assert [r["effective data"] for r in xr] == [r["effective data"] for r in yr]
    assert [r["P(improvement)"] for r in xr] == [r["P(improvement)"] for r in yr]
    # the mean over tasks ("all"): stratified t for the mean, else stratified percentile; Newcombe
    # for P(improvement); in normalised units on both sides
    all_x, all_y = x.table[x.table["task"] == "all"], y.table[y.table["task"] == "all"]
    _same(all_x, all_y, ["difference", "low", "high", "probability", "p_low", "p_high"])
    assert x.over_tasks == y.over_tasks and x.value == y.value
    if has_refs:
        _same(x.thresholds, y.thresholds, ["episodes", "low", "high"])
        for col in ("censor", "label"):
            assert x.thresholds[col].tolist() == y.thresholds[col].tolist(), col
        _same(x.areas, y.areas, ["auc", "low", "high"])
        assert x.areas["sizes"].tolist() == y.areas["sizes"].tolist()
        _same(x.headline, y.headline, ["fraction", "low", "high"])


# --------------------------------------------------------------------------- item 1: effective data


def _loss_study(baseline_means, arm_losses, sizes, *, with_refs):
    """A lower-is-better study whose seeds scatter symmetrically around given means."""
    values = {}
    offsets = (-0.25, 0.0, 0.25)
    for k, size in enumerate(sizes):
        for seed, d in enumerate(offsets):
            values[("scratch", "t", size, seed)] = baseline_means[k] + d
            values[("wide", "t", size, seed)] = arm_losses[k] + d
    refs = {"t": (10.0, 0.0) if with_refs else None}
    return study(values, refs, metric="loss", hib=False)


@pytest.mark.parametrize("with_refs", [True, False])
def test_effective_data_on_a_loss_reads_scikit_learns_decreasing_fit(with_refs):
    sizes = np.array([1, 3, 10, 30, 100])
    base = np.array([8.0, 6.0, 6.4, 3.0, 1.0])  # not monotone: 6.0, 6.4 pool to 6.2
    arm = np.array([7.0, 4.5, 2.0, 1.5, 0.5])
    sc = _loss_study(base, arm, sizes, with_refs=with_refs)
    rep = compare_scores(sc, FAST, baseline="scratch", threshold=0.5)
    got = rep.table.set_index("size")
    # scikit-learn: the loss curve fitted non-increasing on log size, read at the arm's loss
    fit = IsotonicRegression(increasing=False).fit_transform(np.log(sizes), base)
    for k, n in enumerate(sizes):
        level = arm[k]
        if level < fit.min():
            assert got.loc[n, "censor"] == "lower_bound"  # better than the baseline's best
            continue
        # np.interp needs increasing x: walk the decreasing fit from its low end
        d_e = float(np.exp(np.interp(level, fit[::-1], np.log(sizes)[::-1])))
        assert got.loc[n, "effective"] == pytest.approx(d_e, rel=1e-9)
        assert got.loc[n, "censor"] == ""
        assert not got.loc[n, "hurts"]  # a lower loss than the baseline at n is no harm


def test_effective_data_of_a_score_reads_scikit_learns_increasing_fit():
    sizes = np.array([1, 3, 10, 30, 100])
    base = np.array([1.0, 3.0, 2.6, 6.0, 9.0])
    arm = np.array([2.0, 4.0, 7.5, 8.0, 9.5])
    values = {}
    for k, size in enumerate(sizes):
        for seed, d in enumerate((-0.25, 0.0, 0.25)):
            values[("scratch", "t", size, seed)] = base[k] + d
            values[("wide", "t", size, seed)] = arm[k] + d
    sc = study(values, {"t": None})
    got = compare_scores(sc, FAST, baseline="scratch").table.set_index("size")
    fit = IsotonicRegression(increasing=True).fit_transform(np.log(sizes), base)  # scikit-learn
    for k, n in enumerate(sizes[:4]):
        d_e = float(np.exp(np.interp(arm[k], fit, np.log(sizes))))
        assert got.loc[n, "effective"] == pytest.approx(d_e, rel=1e-9)


# --------------------------------------------------------------------------- item 2: raw, lower is better


def test_a_lower_loss_in_every_run_is_an_improvement_without_references():
    rng = np.random.default_rng(3)
    values = {}
    for size in (1, 3, 10):
        for seed in range(5):
            b = 5.0 + rng.normal(0, 0.3)
            values[("scratch", "t", size, seed)] = b
            values[("wide", "t", size, seed)] = b - 1.0 - abs(rng.normal(0, 0.3))
    sc = study(values, {"t": None}, metric="loss", hib=False)
    rep = compare_scores(sc, FAST, baseline="scratch")
    t = rep.table
    assert (t["probability"] == 1.0).all() and (t["p_high"] == 1.0).all()
    # Newcombe (2006) method 5 at A = 1, m = n = 5: the lower end is the root of the paper's score
    # equation (1 - theta)^2 = z^2 V(theta), solved by scipy's brentq; above 1/2, never the point 1
    z, n_star = stats.norm.ppf(0.975), (5 + 5) / 2 - 1
    var = lambda th: th * (1 - th) / 25 * (1 + n_star * ((1 - th) / (2 - th) + th / (1 + th)))  # noqa: E731
    ref = optimize.brentq(lambda th: (1 - th) ** 2 - z * z * var(th), 0.5, 1 - 1e-12)
    np.testing.assert_allclose(t["p_low"], ref, rtol=1e-6)
    assert (t["p_low"] > 0.5).all()
    assert (t["unit"] == "loss").all()
    for size in (1, 3, 10):
        a = np.array([values[("wide", "t", size, s)] for s in range(5)])
        b = np.array([values[("scratch", "t", size, s)] for s in range(5)])
        row = t[t["size"] == size].iloc[0]
        # numpy and scipy: the paired difference in loss and its paired t interval
        assert row["difference"] == pytest.approx(np.mean(a - b))
        lo, hi = stats.t.interval(0.95, 4, loc=np.mean(a - b), scale=stats.sem(a - b))
        assert (row["low"], row["high"]) == pytest.approx((lo, hi))
        assert row["difference"] < 0
    assert any("lower loss is better" in n for n in rep.notes)


# --------------------------------------------------------------------------- item 3: partial references


def _three_tasks():
    rng = np.random.default_rng(5)
    values = {}
    scale = {"a": 1.0, "b": 1.0, "raw": 1000.0}
    for task, k in scale.items():
        for size in (1, 3, 10):
            for seed in range(4):
                base = k * (20 + 10 * np.log(size) + rng.normal(0, 2))
                values[("scratch", task, size, seed)] = base
                values[("wide", task, size, seed)] = base + k * (8 + rng.normal(0, 2))
    refs = {"a": (0.0, 100.0), "b": (10.0, 60.0), "raw": None}
    return values, refs


def test_one_task_without_references_leaves_the_others_normalised():
    values, refs = _three_tasks()
    sc = study(values, refs)
    rep = compare_scores(sc, FAST, baseline="scratch", threshold=0.5)
    t = rep.table
    assert rep.value == "mixed" and rep.over_tasks == ("a", "b")
    assert set(t.loc[t["task"] == "raw", "unit"]) == {"return"}
    assert set(t.loc[t["task"].isin(["a", "b", "all"]), "unit"]) == {"normalised"}
    for size in (1, 3, 10):
        per = {}
        for task, (f, e) in (("a", refs["a"]), ("b", refs["b"])):
            a = np.array([values[("wide", task, size, s)] for s in range(4)])
            b = np.array([values[("scratch", task, size, s)] for s in range(4)])
            per[task] = np.mean((a - f) / (e - f) - (b - f) / (e - f))  # numpy, by hand
            got = t[(t["task"] == task) & (t["size"] == size)]["difference"].iloc[0]
            assert got == pytest.approx(per[task])
        mean_all = t[(t["task"] == "all") & (t["size"] == size)]["difference"].iloc[0]
        assert mean_all == pytest.approx((per["a"] + per["b"]) / 2)  # the raw task left out
    assert any("left out: raw" in n for n in rep.notes)
    assert {r["unit"] for r in transfer_rows(t)} == {"normalised", "return"}  # said per row


def test_p_improvement_over_tasks_uses_only_tasks_with_references():
    # the arm wins on the referenced tasks and loses on the raw one: an average over all three
    # would differ from the average over a and b
    values, refs = _three_tasks()
    rng = np.random.default_rng(8)
    for (arm, task, size, seed), v in list(values.items()):
        if arm == "wide" and task == "raw":
            values[(arm, task, size, seed)] = v - 1000 * (20 + rng.normal(0, 2))
    rep = compare_scores(study(values, refs), FAST, baseline="scratch", threshold=0.5)
    t = rep.table
    for size in (1, 3, 10):
        # scipy's Mann-Whitney U / (m n), per task
        u = {
            task: stats.mannwhitneyu(
                [values[("wide", task, size, s)] for s in range(4)],
                [values[("scratch", task, size, s)] for s in range(4)],
            ).statistic
            / 16
            for task in refs
        }
        assert u["raw"] < 0.5 < min(u["a"], u["b"])  # the case of the test is present
        row = t[(t["task"] == "all") & (t["size"] == size)].iloc[0]
        assert row["probability"] == pytest.approx((u["a"] + u["b"]) / 2)
        assert row["p_low"] < row["probability"] <= row["p_high"]  # Newcombe: never a point


def test_seeds_needed_uses_only_tasks_with_references_or_refuses():
    values, refs = _three_tasks()
    table, notes = seeds_report(study(values, refs), "scratch", effect=0.1)
    assert set(table["task"]) == {"a", "b"} and any("left out: raw" in n for n in notes)
    # the spread is the normalised one: the sample sd of the normalised seed scores (numpy)
    row = table[(table["task"] == "b") & (table["size"] == 3) & (table["arm"] == "wide")].iloc[0]
    a = np.array([values[("wide", "b", 3, s)] for s in range(4)])
    assert row["sd_arm"] == pytest.approx(np.std((a - 10.0) / 50.0, ddof=1))
    with pytest.raises(InvalidInput, match="no task has floor and expert"):
        seeds_report(study(values, dict.fromkeys(refs)), "scratch", effect=0.1)


# --------------------------------------------------------------------------- item 5


def test_a_baseline_with_one_size_on_one_task_costs_only_that_tasks_effective_data():
    values, refs = _three_tasks()
    thin = {k: v for k, v in values.items() if not (k[0] == "scratch" and k[1] == "b" and k[2] > 1)}
    rep = compare_scores(study(thin, refs), FAST, baseline="scratch", threshold=0.5)
    t = rep.table
    assert t.loc[t["task"] == "b", "effective"].isna().all()
    assert t.loc[t["task"] == "a", "effective"].notna().all()
    assert any("fewer than two sizes >= 1 on b" in n for n in rep.notes)


def test_missing_baseline_runs_raise_no_numpy_warning():
    values, refs = _three_tasks()
    gappy = {
        k: v
        for k, v in values.items()
        if not (k[0] == "scratch" and k[1] == "a" and k[2] == 3 and k[3] < 3)
    }
    sc = study(gappy, refs)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # an "All-NaN slice" RuntimeWarning would fail here
        for est in ("mean", "median", "iqm"):
            s = CurveSettings(estimator=est, resamples=200)
            compare_scores(sc, s, baseline="scratch", threshold=0.5)
            curve_scores(sc, s, across_tasks=True)


def test_areas_over_different_size_ranges_say_so():
    values, refs = _three_tasks()
    short = {k: v for k, v in values.items() if not (k[0] == "wide" and k[2] == 10)}
    rep = compare_scores(study(short, refs), FAST, baseline="scratch", threshold=0.5)
    assert set(rep.areas["sizes"]) == {"1-3", "1-10"}
    assert any("different size ranges (1-10, 1-3)" in n for n in rep.notes)
