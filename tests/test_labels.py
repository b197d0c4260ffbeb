"""Labels need evidence: each word only where the printed interval supports it (table-driven)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from fewshot.stats import CurveSettings
from fewshot.stats.labels import NO_CLEAR, effective_label, effective_mark, threshold_label
from fewshot.stats.transfer import effective_data, threshold_sizes
from fewshot.tables import effective_cell, threshold_cell

INF, NAN = math.inf, math.nan


@pytest.mark.parametrize(
    ("size", "low", "high", "label"),
    [
        (10, 12.0, 40.0, "helps"),  # whole D_E interval above n: D_T > 0
        (10, 2.0, 8.0, "hurts"),  # whole interval below n: D_T < 0
        (10, 2.0, 40.0, NO_CLEAR),  # holds n
        (10, 0.0, INF, NO_CLEAR),  # the data say nothing
        (10, 10.0, 30.0, NO_CLEAR),  # touches n: not clear
        (10, 30.0, INF, "helps"),  # beyond the ladder, clearly
        (10, NAN, NAN, ""),  # no interval, no word
    ],
)
def test_effective_labels(size, low, high, label):
    assert effective_label(size, low, high) == label


@pytest.mark.parametrize(
    ("censor", "low", "high", "mark"),
    [
        ("lower_bound", 100.0, INF, ">="),  # interval wholly beyond the largest size (100)
        ("lower_bound", 30.0, INF, ""),  # point beyond, interval not: no mark
        ("upper_bound", 0.0, 1.0, "<="),  # interval at or below the smallest size (1)
        ("upper_bound", 0.0, 3.0, ""),
        ("", 3.0, 10.0, ""),
        ("lower_bound", NAN, NAN, ""),
    ],
)
def test_effective_marks(censor, low, high, mark):
    assert effective_mark(censor, low, high, 1, 100) == mark


@pytest.mark.parametrize(
    ("low", "high", "label"),
    [
        (0.0, 0.0, "zero-shot"),
        (0.0, 1.0, "already there"),  # at or below the smallest size (1)
        (0.0, 3.0, ""),  # might be at 1, might be at 3
        (100.0, INF, "not reached"),  # beyond the largest size (100)
        (30.0, INF, ""),  # might be reached at 30-100
        (3.0, 30.0, ""),
        (NAN, NAN, ""),
    ],
)
def test_threshold_labels(low, high, label):
    assert threshold_label(low, high, 1, 100) == label


def _frame(arm_level, base_curve, noise, seeds=4, seed=0):
    rng = np.random.default_rng(seed)
    sizes = (1, 3, 10, 30, 100)
    rows = []
    for s in range(seeds):
        shared = rng.normal(0, noise)
        for k, n in enumerate(sizes):
            for arm, v in (("wide", arm_level(n)), ("scratch", base_curve[k])):
                x = v + shared + rng.normal(0, noise)
                rows.append(("wide" if arm == "wide" else "scratch", arm, "a", None, n, s, 0, x, x))
    cols = ["arm", "role", "task", "group", "size", "seed", "replicate", "score", "normalised"]
    frame = pd.DataFrame(rows, columns=cols)
    return frame.assign(role=np.where(frame["arm"] == "scratch", "baseline", "pretrained"))


@pytest.mark.parametrize(
    ("arm", "noise", "size", "expected"),
    [
        (lambda n: 0.05, 0.01, 10, "hurts"),  # clearly below the baseline's 0.2 at 10
        (lambda n: 0.75, 0.01, 10, "helps"),  # clearly above
        (
            lambda n: 0.2,
            0.2,
            10,
            NO_CLEAR,
        ),  # equal, noisy: the old rule printed "hurts" half the time
        (lambda n: 0.15, 0.3, 10, NO_CLEAR),  # a bit below, very noisy
    ],
)
def test_labels_on_synthetic_studies(arm, noise, size, expected):
    base = [0.0, 0.1, 0.2, 0.5, 0.7]
    table = effective_data(_frame(arm, base, noise), "scratch", CurveSettings(resamples=200))
    row = table.set_index("size").loc[size]
    assert row["label"] == expected
    assert effective_cell(row).endswith(expected)
    assert ("hurts" in effective_cell(row)) == (expected == "hurts")


def test_beyond_the_ladder_is_marked_only_with_evidence():
    base = [0.0, 0.1, 0.2, 0.5, 0.7]
    clear = effective_data(
        _frame(lambda n: 0.95, base, 0.01), "scratch", CurveSettings(resamples=200)
    )
    assert (clear["mark"] == ">=").all() and effective_cell(clear.iloc[0]).startswith(">=")
    vague = effective_data(
        _frame(lambda n: 0.8, base, 0.15, seeds=3, seed=1), "scratch", CurveSettings(resamples=200)
    )
    big = vague.set_index("size").loc[100]
    assert (
        big["censor"] == "lower_bound"
        and big["mark"] == ""
        and not effective_cell(big).startswith(">=")
    )


def test_threshold_words_need_evidence():
    frame = _frame(lambda n: 0.0, [0.0, 0.3, 0.6, 0.8, 0.95], 0.01).query("arm == 'scratch'")
    far = threshold_sizes(frame, 2.0, CurveSettings(resamples=200)).iloc[
        0
    ]  # never reached, clearly
    assert far["label"] == "not reached" and "not reached" in threshold_cell(far)
    done = threshold_sizes(frame, -1.0, CurveSettings(resamples=200)).iloc[0]
    assert done["label"] == "already there" and "already there" in threshold_cell(done)
    noisy = _frame(lambda n: 0.0, [0.0, 0.3, 0.6, 0.8, 0.95], 0.4, seeds=3).query(
        "arm == 'scratch'"
    )
    edge = threshold_sizes(noisy, 0.97, CurveSettings(resamples=200)).iloc[0]
    assert edge["label"] == "" and "not reached" not in threshold_cell(edge)
