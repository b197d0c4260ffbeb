"""The coverage numbers quoted in reports come from the engine: re-measure a few of them."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from fewshot.stats.bootstrap import bootstrap_cells
from fewshot.stats.coverage import MEASURED, coverage_sentence
from fewshot.stats.estimators import ESTIMATORS


@pytest.mark.parametrize(
    ("method", "dist"), [("t", "normal"), ("percentile", "normal"), ("t", "lognormal")]
)
def test_recorded_coverage_matches_a_fresh_simulation(method, dist):
    # 3000 fresh studies at 5 seeds: the Monte Carlo standard error of a coverage near 90% is about
    # 0.55 points, so 2.5 points is a generous but still telling bound.
    rng = np.random.default_rng(77)
    data = rng.normal(size=(3000, 5)) if dist == "normal" else rng.lognormal(0, 0.5, size=(3000, 5))
    truth = 0.0 if dist == "normal" else float(np.exp(0.125))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = bootstrap_cells(
            data, ESTIMATORS["mean"], method=method, resamples=1000, rng=rng, is_mean=True
        )
    fresh = np.mean((res.low <= truth) & (truth <= res.high))
    assert fresh == pytest.approx(MEASURED[method][dist][5], abs=0.025)


def test_coverage_sentence_names_the_nearest_seed_count():
    assert "from 5 seeds" in coverage_sentence("t", 5) and "normal 95%" in coverage_sentence("t", 5)
    assert "from 3 seeds" in coverage_sentence(
        "t", 4
    )  # between two measured counts: the fewer, the cautious one
    assert "from 10 seeds" in coverage_sentence("t", 30)
    assert "not measured" in coverage_sentence("magic", 5)


def test_printed_table_covers_every_quantity_and_kind():
    from fewshot.stats.coverage import KINDS, PRINTED, printed_sentence
    from fewshot.stats.harness import QUANTITIES

    assert set(PRINTED) == set(QUANTITIES)
    assert {q for qs in KINDS.values() for q in qs} <= set(QUANTITIES)
    for q in QUANTITIES:
        for noise in ("normal", "lognormal", "two-mode"):
            assert set(PRINTED[q][noise]) == {3, 5, 10}
    text = printed_sentence(5)
    assert "at 5 seeds" in text and all(kind in text for kind in KINDS)
    # the harness's last run met the targets on normal noise (>= 90% at 3 seeds, >= 93% at 5)
    assert all(
        PRINTED[q]["normal"][3] >= 0.90 and PRINTED[q]["normal"][5] >= 0.93 for q in QUANTITIES
    )
