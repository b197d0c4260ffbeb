"""The vectorised paths of large studies (issue 16) against the plain computations they replace.

Every fast path must give the numbers of the slow one: numpy's and scipy's own estimators, the
broadcast comparison, pandas' reindex. Plus the progress callback long statistics report to.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from fewshot.stats import CurveSettings, aggregate_curves
from fewshot.stats.bootstrap import bootstrap_cells
from fewshot.stats.curves import _cells
from fewshot.stats.estimators import _sorted_nanmedian, nan_estimates
from fewshot.stats.intervals import rescaled_strata
from fewshot.stats.progress import progress_callback
from fewshot.stats.resample import CurveResampler


def _with_gaps(rng: np.random.Generator, shape: tuple[int, int], share: float) -> np.ndarray:
    x = np.round(rng.normal(0.5, 0.4, size=shape), 2)  # rounded: ties, as real scores have
    x[rng.random(shape) < share] = np.nan
    return x


@pytest.mark.filterwarnings("ignore:All-NaN slice:RuntimeWarning")
@pytest.mark.filterwarnings("ignore:Mean of empty slice:RuntimeWarning")
@pytest.mark.parametrize("share", [0.0, 0.3])
def test_shared_sort_equals_numpy_and_scipy(share):
    rng = np.random.default_rng(3)
    x = _with_gaps(rng, (200, 13), share)
    x[0] = np.nan  # a row with no run at all: NaN, as numpy's nan-functions give
    iqm, mean, median, gap = nan_estimates(["iqm", "mean", "median", "optimality_gap"], x)
    # numpy's nanmedian / nanmean are the reference
    np.testing.assert_array_equal(median, np.nanmedian(x, axis=1))
    np.testing.assert_array_equal(_sorted_nanmedian(np.sort(x, axis=1)), np.nanmedian(x, axis=1))
    np.testing.assert_array_equal(mean, np.nanmean(x, axis=1))
    np.testing.assert_allclose(gap[1:], np.nanmean(np.maximum(0, 1 - x[1:]), axis=1))
    # scipy.stats.trim_mean(., 0.25) of each row's present runs is the IQM (Agarwal et al. 2021)
    for row, got in zip(x[1:], iqm[1:], strict=True):
        assert got == pytest.approx(stats.trim_mean(row[~np.isnan(row)], 0.25), rel=1e-12)
    assert np.isnan(iqm[0]) and np.isnan(median[0]) and np.isnan(mean[0])


def test_rescaled_strata_equal_rescaling_every_draw():
    rng = np.random.default_rng(5)
    strata = [rng.normal(size=n) for n in (3, 5, 4)]
    strata[1][2] = np.nan  # a missing run stays missing and out of its stratum's mean
    indices = [rng.integers(0, len(x), size=(50, len(x))) for x in strata]
    parts = []
    for x, idx in zip(strata, indices, strict=True):
        n = int(np.isfinite(x).sum())
        centre = np.nanmean(x)
        parts.append(centre + np.sqrt(n / (n - 1)) * (x[idx] - centre))
    np.testing.assert_array_equal(rescaled_strata(strata, indices), np.concatenate(parts, axis=1))


def test_resampler_matrix_equals_pandas_reindex():
    rows = [
        {"arm": a, "task": t, "size": s, "seed": k, "v": float(hash((a, t, s, k)) % 97)}
        for a in ("x", "y")
        for t in ("t1", "t2")
        for s in (1, 4, 16)
        for k in range(4)
        if not (a == "y" and s == 4) and not (t == "t2" and k == 3 and s == 16)
    ]
    scores = pd.DataFrame(rows)
    rs = CurveResampler(scores, "v", CurveSettings(resamples=100))
    for (arm, task), g in scores.groupby(["arm", "task"]):
        wide = g.pivot(index="size", columns="seed", values="v").reindex(columns=rs.seeds[task])
        np.testing.assert_array_equal(rs.sizes(arm, task), wide.index.to_numpy())
        want = np.array([1, 2, 4, 16])  # 2 is never run: a NaN row
        np.testing.assert_array_equal(
            rs.matrix(arm, task, want), wide.reindex(want).to_numpy(dtype=float)
        )


def test_t_interval_without_se_draws_the_same_and_gives_the_same_interval():
    x = np.random.default_rng(6).normal(size=(1, 6))
    a, b = np.random.default_rng(7), np.random.default_rng(7)
    full = bootstrap_cells(x, np.mean, method="t", rng=a, resamples=500, is_mean=True)
    lean = bootstrap_cells(
        x, np.mean, method="t", rng=b, resamples=500, is_mean=True, want_se=False
    )
    assert (full.low, full.high) == (lean.low, lean.high)
    assert np.isnan(lean.se).all() and np.isfinite(full.se).all()
    assert a.integers(0, 1000) == b.integers(0, 1000)  # the next cell sees the same stream


def test_long_statistics_report_progress_to_the_callback_only():
    rows = [
        {
            "arm": a,
            "role": "pretrained",
            "task": t,
            "group": None,
            "size": s,
            "seed": k,
            "replicate": 0,
            "normalised": 0.1 * k + s,
        }
        for a in ("x", "y")
        for t in ("t1", "t2")
        for s in (1, 2, 3)
        for k in range(3)
    ]
    seen: list[tuple[str, int, int]] = []
    with progress_callback(lambda *a: seen.append(a)):
        aggregate_curves(pd.DataFrame(rows), CurveSettings(resamples=200))
    stage = [s for s in seen if s[0] == "aggregates over tasks"]
    assert stage[0][1] == 0 and stage[-1][1:] == (6, 6)  # 2 arms x 3 sizes, to the end
    assert [d for _, d, _ in stage] == sorted(d for _, d, _ in stage)
    after = len(seen)
    aggregate_curves(pd.DataFrame(rows), CurveSettings(resamples=200))
    assert len(seen) == after  # outside the block nothing is reported


def test_curve_cells_equal_pandas_groups():
    # the cells curves() bootstraps, against pandas' own groups of the same (shuffled) table
    rng = np.random.default_rng(9)
    rows = [
        {"arm": a, "role": "r" + a, "task": t, "group": t.upper(), "size": s, "seed": k,
         "score": float(rng.normal(s, 1))}
        for a in ("b", "a")
        for t in ("t2", "t1")
        for s in (4, 1)
        for k in (3, 1, 0)
        for _ in range(3 if (a, t, s, k) == ("a", "t1", 1, 1) else 2 if t == "t1" else 1)
    ]  # fmt: skip
    data = pd.DataFrame(rows).sample(frac=1, random_state=1)
    got = _cells(data, "score")
    want = list(data.groupby(["arm", "task", "size"], sort=False))
    assert [(c["arm"], c["task"], c["size"]) for c in got] == [k for k, _ in want]
    for cell, (_, frame) in zip(got, want, strict=True):
        per_seed = frame.groupby("seed")["score"].apply(lambda s: s.to_numpy())
        assert cell["seeds"] == tuple(per_seed.index)
        assert (cell["role"], cell["group"]) == (frame.iloc[0]["role"], frame.iloc[0]["group"])
        lengths = {len(v) for v in per_seed}
        r = lengths.pop() if len(lengths) == 1 else 1
        want_matrix = np.stack([v if len(v) == r else np.array([v.mean()]) for v in per_seed])
        np.testing.assert_array_equal(cell["matrix"], want_matrix)
        assert cell["uneven"] == (len({len(v) for v in per_seed}) > 1)
