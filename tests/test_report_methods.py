"""The report's methods text says what was computed: each sentence checked against the report
objects it was written from, over reports built with different settings."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest

from fewshot.analysis import StudyReports, analyse_study, read_study
from fewshot.analysis.qualify import CLIPPED_COLUMN
from fewshot.report import DEFAULT_CAUTION, build_report, methods_sentences
from fewshot.report.html import paragraph
from fewshot.report.methods import level, resampling, seed_count
from fewshot.stats import CurveSettings
from fewshot.stats.coverage import printed_sentence

pytestmark = pytest.mark.filterwarnings("ignore::RuntimeWarning")


@pytest.fixture
def study(filled_ledger):
    """The filled ledger's study, read once with its completion."""
    return read_study(filled_ledger, with_status=True)


def _check_common(rep: StudyReports) -> dict[str, str]:
    """What every report's methods must say, checked against ``rep``; returns the sentences."""
    said = methods_sentences(rep)
    s, t = rep.settings, rep.curves.table
    n = seed_count(t["n_seeds"])
    assert f"{n} stand behind each interval" in said["cells"]
    assert f"{level(s.confidence)} " in said["cells"]
    lo, hi = int(t["n_seeds"].min()), int(t["n_seeds"].max())
    assert ("between" in said["cells"]) == (lo != hi)  # "3 seeds", never "between 3 and 3"
    assert f"between {lo} and {lo} seeds" not in " ".join(said.values())
    if rep.compare is not None:
        assert said["printed coverage"] == printed_sentence(int(rep.compare.table["n_seeds"].min()))
    html = build_report(rep)
    for sentence in said.values():
        assert paragraph(sentence) in html  # the report prints exactly these sentences
    return said


def test_t_cells_name_no_resamples(study):
    rep = analyse_study(study, CurveSettings())
    said = _check_common(rep)
    assert set(rep.curves.table["method"]) == {"t"}
    assert "Student's t intervals from the seeds' values (no resampling)" in said["cells"]
    assert "resample" not in said["cells"]
    assert set(rep.compare.table["method"]) == {"t"}  # the paired differences, closed form
    assert "resample" not in said["differences"]
    assert "final evaluation" in said["score"]
    assert "covered the true mean" in said["cell coverage"]  # the measured coverage of t


def test_bootstrap_cells_say_how_many_resamples_of_what(study):
    rep = analyse_study(study, CurveSettings(method="percentile", resamples=500, seed=7))
    said = _check_common(rep)
    assert set(rep.curves.table["method"]) == {"percentile"}
    assert (
        "percentile bootstrap intervals from 500 bootstrap resamples of whole seeds "
        "(resampling seed 7)" in said["cells"]
    )
    assert "500 bootstrap resamples of whole seeds, each pair kept together" in said["differences"]


def test_another_estimator_gets_a_bootstrap_standard_error(study):
    rep = analyse_study(study, CurveSettings(estimator="median", resamples=300))
    said = _check_common(rep)
    assert set(rep.curves.table["method"]) == {"t (bootstrap SE)"}
    assert "bootstrap standard error from 300 bootstrap resamples" in said["cells"]
    assert "not of the median" in said["cell coverage"]


def test_the_confidence_level_and_the_rule_are_the_ones_used(study):
    rep = analyse_study(study, CurveSettings(confidence=0.9), select="last:1")
    said = _check_common(rep)
    assert "90% Student's t" in said["cells"]
    assert "nominal 95% intervals; the tables show 90% intervals" in said["cell coverage"]
    assert rep.curves.scores.rule == "last:1" and "the rule last:1" in said["score"]


def test_seed_counts_are_a_range_only_when_they_differ(study):
    equal = methods_sentences(analyse_study(study, CurveSettings()))
    assert "3 seeds stand behind each interval" in equal["cells"]
    res = study.results
    short = dataclasses.replace(study, results=res[res["run"] != "wide/reach/n1/s2"])
    rep = analyse_study(short, CurveSettings())
    said = _check_common(rep)
    assert "between 2 and 3 seeds stand behind each interval" in said["cells"]


def _outside(rep: StudyReports, lo: float, hi: float) -> int:
    """How many intervals of the unclipped ``rep`` leave the ranges a metric in [lo, hi] allows,
    counted here from the bounds (floor 0, expert 100: normalised range [lo, hi] / 100)."""
    n_lo, n_hi = lo / 100, hi / 100
    count = 0
    for r, a, b in (
        (rep.curves, lo, hi),
        (rep.normalised_curves, n_lo, n_hi),
        (rep.aggregate, n_lo, n_hi),
    ):
        assert r is not None
        t = r.table
        if "aggregate" in t:
            gap = t["aggregate"] == "optimality_gap"
            a = np.where(gap, max(0.0, 1 - n_hi), a)
            b = np.where(gap, max(0.0, 1 - n_lo), b)
        count += int(((t["low"] < a) | (t["high"] > b)).sum())
    cmp = rep.compare
    assert cmp is not None
    width = n_hi - n_lo  # normalised rows: a difference lies in [-(hi - lo), hi - lo] / 100
    count += int(((cmp.table["low"] < -width) | (cmp.table["high"] > width)).sum())
    for t in (cmp.areas, cmp.scaling):
        if len(t):
            count += int(((t["low"] < n_lo) | (t["high"] > n_hi)).sum())
    return count


def test_clipping_to_bounds_is_said_with_its_count(study):
    # the filled ledger's scores run 0..102; declare [0, 100] so that some intervals pass it
    plain = analyse_study(study, CurveSettings())
    bounded = dataclasses.replace(study, study={**study.study, "bounds": (0.0, 100.0)})
    rep = analyse_study(bounded, CurveSettings())
    said = _check_common(rep)
    expected = _outside(plain, 0.0, 100.0)
    assert expected > 0
    assert "lies in [0, 100]" in said["bounds"]
    assert f"; {expected} of " in said["bounds"] and said["bounds"].endswith("were clipped.")
    n = (
        sum(
            int(t[CLIPPED_COLUMN].sum())
            for t in (rep.curves.table, rep.aggregate.table, rep.compare.table, rep.compare.areas)  # type: ignore[union-attr]
        )
        + (int(rep.compare.scaling[CLIPPED_COLUMN].sum()) if len(rep.compare.scaling) else 0)
        + int(rep.normalised_curves.table[CLIPPED_COLUMN].sum())
    )  # type: ignore[union-attr]
    assert n == expected
    assert "bounds" not in methods_sentences(plain)  # no bounds declared: nothing said


def test_unfinished_runs_are_said_when_counted(study):
    res = study.results
    status = np.where(res["run"] == "wide/reach/n3/s0", "running", "done")
    late = dataclasses.replace(study, results=res.assign(run_status=status))
    said = _check_common(analyse_study(late, CurveSettings()))
    assert "marked *" in said["unfinished"]
    assert "unfinished" not in methods_sentences(analyse_study(study, CurveSettings()))


def test_the_caution_is_neutral_by_default_and_the_study_can_replace_it(study):
    html = build_report(analyse_study(study, CurveSettings()))
    assert paragraph(DEFAULT_CAUTION) in html
    for word in ("robot", "hardware", "policy"):
        assert word not in DEFAULT_CAUTION.lower()
    own = dataclasses.replace(study, study={**study.study, "caution": "Scored on one lab's data."})
    html = build_report(analyse_study(own, CurveSettings()))
    assert paragraph("Scored on one lab's data.") in html and DEFAULT_CAUTION not in html
    assert html.index("Scored on one lab") < html.index("Findings")  # the report opens with it


def test_resampling_is_named_only_for_methods_that_resample():
    assert resampling(["t"], 500, 1) == "no resampling"
    assert resampling(["hall", "t"], 500, 1) == "no resampling"
    assert resampling(["t (bootstrap SE)"], 500, 1) == "500 resamples, seed 1"
    assert resampling(["t", "percentile"], 500, 1) == "500 resamples, seed 1"


def test_level_and_seed_count_read_as_written():
    assert level(0.95) == "95%" and level(0.975) == "97.5%" and level(0.9) == "90%"
    assert seed_count(pd.Series([6, 6])) == "6 seeds"
    assert seed_count(pd.Series([1])) == "1 seed"
    assert seed_count(pd.Series([3, 6, 5])) == "between 3 and 6 seeds"
