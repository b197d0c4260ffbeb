"""Run scores, normalised scores, curves and aggregates over tidy results tables."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from fewshot.errors import InvalidInput
from fewshot.stats import (
    CurveSettings,
    aggregate_curves,
    curves,
    normalise,
    run_scores,
    variance_share,
)

COLS = [
    "run",
    "arm",
    "role",
    "task",
    "group",
    "size",
    "seed",
    "replicate",
    "metric",
    "step",
    "value",
]


def results_table(rows: list[tuple]) -> pd.DataFrame:
    frame = pd.DataFrame(rows, columns=COLS)
    frame["step"] = frame["step"].astype("Int64")
    return frame


def simple_results(
    arms=("wide", "scratch"), tasks=("a", "b"), sizes=(1, 3, 10), seeds=5, noise=1.0, seed=0
):
    rng = np.random.default_rng(seed)
    rows = []
    for arm in arms:
        for task in tasks:
            for size in sizes:
                for s in range(seeds):
                    v = 10 * np.log1p(size) + (5 if arm == "wide" else 0) + rng.normal(0, noise)
                    role = "baseline" if arm == "scratch" else "pretrained"
                    rows.append(
                        (
                            f"{arm}/{task}/n{size}/s{s}",
                            arm,
                            role,
                            task,
                            "g1",
                            size,
                            s,
                            0,
                            "return",
                            None,
                            v,
                        )
                    )
    return results_table(rows)


def test_score_rules():
    rows = []
    for step, ret, val in [(10, 5.0, 0.2), (20, 9.0, 0.9), (30, 7.0, 0.5)]:
        for metric, v in (("return", ret), ("val_return", val)):
            rows.append(("a/t/n1/s0", "a", "pretrained", "t", None, 1, 0, 0, metric, step, v))
    rows.append(("a/t/n1/s0", "a", "pretrained", "t", None, 1, 0, 0, "return", None, 6.0))
    res = results_table(rows)
    assert run_scores(res, "return")["score"].tolist() == [6.0]  # the final evaluation
    best = run_scores(res, "return", "best:val_return")
    assert best["score"].tolist() == [9.0] and best["step"].tolist() == [20.0]
    assert run_scores(res, "return", "least:val_return")["score"].tolist() == [5.0]
    assert run_scores(res, "return", "last:2")["score"].tolist() == [pytest.approx((7.0 + 6.0) / 2)]
    no_final = res[res["step"].notna()]
    assert run_scores(no_final, "return")["score"].tolist() == [7.0]  # last step when no final
    assert run_scores(res, "return", "final")["rule"].tolist() == ["final"]


@pytest.mark.parametrize(
    ("rule", "fragment"),
    [
        ("best:return", "may not be chosen by 'return' itself"),
        ("last:0", "^`select` must be"),
        ("top", "^`select` must be"),
        ("best:nope", "validation metric 'nope'"),
    ],
)
def test_bad_score_rules(rule, fragment):
    with pytest.raises(InvalidInput, match=fragment):
        run_scores(simple_results(), "return", rule)


def test_unknown_metric_lists_the_known_ones():
    with pytest.raises(
        InvalidInput, match="no results for metric 'success'. Metrics in the ledger: return"
    ):
        run_scores(simple_results(), "success")


def test_normalise_both_directions():
    scores = pd.DataFrame({"task": ["up", "down", "raw"], "score": [60.0, 2.0, 5.0]})
    tasks = pd.DataFrame(
        {
            "task": ["up", "down", "raw"],
            "floor": [20.0, 10.0, np.nan],
            "expert": [120.0, 0.0, np.nan],
        }
    )
    up = normalise(scores[scores.task == "up"], tasks, higher_is_better=True)
    assert up["normalised"].tolist() == [pytest.approx(0.4)]
    down = normalise(scores[scores.task == "down"], tasks, higher_is_better=False)
    assert down["normalised"].tolist() == [
        pytest.approx(0.8)
    ]  # loss 2 between floor 10 and expert 0
    raw = normalise(scores[scores.task == "raw"], tasks)
    assert np.isnan(raw["normalised"].iloc[0]) and raw["reference"].iloc[0] == "none"
    with pytest.raises(InvalidInput, match="expert .* must lie above floor"):
        normalise(scores, tasks.assign(expert=[10.0, 0.0, np.nan]))


def test_curve_points_equal_scipy_t_intervals():
    res = simple_results()
    sc = run_scores(res, "return")
    table = curves(sc, CurveSettings(method="t", resamples=200))
    assert len(table) == 2 * 2 * 3 and (table["n_seeds"] == 5).all()
    for row in table.itertuples():
        x = sc[(sc.arm == row.arm) & (sc.task == row.task) & (sc["size"] == row.size)][
            "score"
        ].to_numpy()
        ref = stats.t.interval(
            0.95, len(x) - 1, loc=x.mean(), scale=stats.sem(x)
        )  # scipy: Student's t
        assert (row.low, row.high) == pytest.approx(ref)
        assert row.estimate == pytest.approx(x.mean())


def test_arms_and_sizes_are_resampled_together():
    # "scratch" is "wide" minus 5 in every seed: with seeds resampled jointly, the percentile
    # intervals differ by exactly 5, which independent draws per cell would not give.
    res = simple_results(arms=("wide",))
    shifted = res.assign(
        arm="scratch",
        role="baseline",
        value=res["value"] - 5,
        run=res["run"].str.replace("wide", "scratch"),
    )
    sc = run_scores(pd.concat([res, shifted]), "return")
    table = curves(sc, CurveSettings(method="percentile", resamples=2000)).set_index(
        ["arm", "task", "size"]
    )
    diff = table.loc["wide"][["low", "high"]] - table.loc["scratch"][["low", "high"]]
    assert np.allclose(diff.to_numpy(), 5)


def test_one_seed_and_two_seeds_are_flagged():
    res = simple_results(seeds=1)
    table = curves(run_scores(res, "return"), CurveSettings(resamples=200))
    assert table["low"].isna().all() and (table["note"] == "one seed: no interval").all()
    two = curves(run_scores(simple_results(seeds=2), "return"), CurveSettings(resamples=200))
    assert (two["note"] == "under 3 seeds").all() and two["low"].notna().all()


def test_replicates_give_a_variance_share():
    rng = np.random.default_rng(4)
    rows = []
    for s in range(40):
        subset_effect = rng.normal(0, 2)  # variance 4 from the subset
        for r in range(5):
            rows.append(
                (
                    f"a/t/n5/s{s}/r{r}",
                    "a",
                    "pretrained",
                    "t",
                    None,
                    5,
                    s,
                    r,
                    "return",
                    None,
                    subset_effect + rng.normal(0, 1),
                )
            )  # variance 1 from training
    table = curves(run_scores(results_table(rows), "return"), CurveSettings(resamples=500))
    assert table["n_replicates"].tolist() == [5]
    assert table["subset_share"].iloc[0] == pytest.approx(0.8, abs=0.1)  # true share 4 / (4 + 1)


def test_variance_share_edge_cases():
    same_seeds = np.array([[[1.0, 2.0], [1.0, 2.0], [1.0, 2.0]]])
    assert variance_share(same_seeds)[0] == 0.0  # all variance within seeds
    constant = np.ones((1, 3, 2))
    assert np.isnan(variance_share(constant)[0])


def test_aggregates_on_the_precipice_example():
    # Agarwal et al. (2021): scores [[1,2],[2,2],[1,1],[2,1]] (runs x tasks) have IQM, mean and median 1.5.
    matrix = np.array([[1, 2], [2, 2], [1, 1], [2, 1]], float)
    rows = []
    for run in range(4):
        for t, task in enumerate(("t0", "t1")):
            rows.append(
                {
                    "arm": "x",
                    "role": "pretrained",
                    "task": task,
                    "group": None,
                    "size": 1,
                    "seed": run,
                    "replicate": 0,
                    "normalised": matrix[run, t],
                }
            )
    table = aggregate_curves(pd.DataFrame(rows), CurveSettings(resamples=2000)).set_index(
        "aggregate"
    )
    for name in ("iqm", "mean", "median"):
        assert table.loc[name, "estimate"] == pytest.approx(1.5)
    assert table.loc["optimality_gap", "estimate"] == pytest.approx(0.0)  # no score is below 1
    assert table.loc["iqm", "n_tasks"] == 2 and table.loc["iqm", "n_runs"] == 8


def test_stratified_aggregate_keeps_each_tasks_seed_count():
    # Task "a" has far larger scores than task "b": a stratified resample never changes how many
    # runs each task contributes, so the mean of every resample is an average of 5 "a" and 5 "b" runs.
    res = simple_results(arms=("wide",), tasks=("a", "b"), sizes=(3,))
    sc = run_scores(res, "return").assign(
        normalised=lambda f: np.where(f["task"] == "a", 100.0, 0.0)
    )
    table = aggregate_curves(sc, CurveSettings(resamples=500)).set_index("aggregate")
    assert table.loc["mean", "low"] == table.loc["mean", "high"] == pytest.approx(50.0)


def test_by_group_and_missing_seed_notes():
    res = simple_results(tasks=("a", "b"))
    res.loc[res["task"] == "b", "group"] = "g2"
    sc = normalise(
        run_scores(res, "return"),
        pd.DataFrame({"task": ["a", "b"], "floor": [0.0, 0.0], "expert": [50.0, 50.0]}),
    )
    table = aggregate_curves(sc, CurveSettings(resamples=300), by_group=True)
    assert set(table["group"]) == {"g1", "g2"} and (table["n_tasks"] == 1).all()
    dropped = sc.drop(
        sc[(sc.task == "a") & (sc.seed == 0) & (sc["size"] == 1) & (sc.arm == "wide")].index
    )
    note = aggregate_curves(dropped, CurveSettings(resamples=300))
    assert (
        note[(note.arm == "wide") & (note["size"] == 1)]["note"].iloc[0] == "a: 1 seed(s) missing"
    )


@pytest.mark.parametrize(
    ("settings", "fragment"),
    [
        (CurveSettings(estimator="mode"), "^`estimator` must be one of"),
        (CurveSettings(method="x"), "^`method` must be one of"),
        (CurveSettings(confidence=0), "^`confidence` must lie"),
        (CurveSettings(resamples=5), "^`resamples` must be"),
        (CurveSettings(method="bootstrap-t", estimator="iqm"), "`estimator` 'mean' only"),
    ],
)
def test_bad_curve_settings(settings, fragment):
    # the library names its parameters; only the command line speaks of --flags
    with pytest.raises(InvalidInput, match=fragment):
        curves(run_scores(simple_results(), "return"), settings)


def test_nan_aware_estimators_equal_scipy_on_the_present_runs():
    from fewshot.stats.estimators import nan_estimate

    rng = np.random.default_rng(5)
    x = rng.normal(size=(40, 9))
    x[rng.random(x.shape) < 0.2] = np.nan
    for i, row in enumerate(x):
        kept = row[~np.isnan(row)]
        if kept.size == 0:
            continue
        # scipy.stats.trim_mean and numpy are the references for the runs that are present
        assert nan_estimate("iqm", x)[i] == pytest.approx(stats.trim_mean(kept, 0.25))
        assert nan_estimate("median", x)[i] == pytest.approx(np.median(kept))
        assert nan_estimate("optimality_gap", x)[i] == pytest.approx(
            np.mean(np.maximum(0, 1 - kept))
        )
