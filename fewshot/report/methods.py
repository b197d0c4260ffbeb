"""The report's methods text, written from what was computed.

Each sentence reads the report objects of :func:`fewshot.analysis.analyse_study`: the interval
method each table's ``method`` column names, the seeds behind its rows, the settings, the score
rule, the study's bounds and how many intervals were clipped to them. Nothing is said of a
method no table used (a t interval uses no resamples, so its sentence names none).
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

import pandas as pd

from fewshot.analysis import StudyReports
from fewshot.analysis.qualify import CLIPPED_COLUMN, UNFINISHED_COLUMN, clipped_count
from fewshot.stats.coverage import coverage_sentence, printed_sentence

__all__ = ["methods_sentences", "level", "seed_count", "resampling"]

MEASURED_LEVEL = 0.95  # the nominal level of every coverage the project measured

# interval method (a table's ``method`` label) -> what it is, and whether it resamples
CELL_METHODS: dict[str, tuple[str, bool]] = {
    "t": ("Student's t intervals from the seeds' values", False),
    "hall": ("Hall's (1992) skewness-corrected t intervals from the seeds' values", False),
    "t (bootstrap SE)": ("t intervals with a bootstrap standard error", True),
    "percentile": ("percentile bootstrap intervals", True),
    "basic": ("basic bootstrap intervals", True),
    "bca": ("BCa bootstrap intervals", True),
    "expanded": ("expanded percentile bootstrap intervals", True),
    "bootstrap-t": ("bootstrap-t intervals", True),
}
ACROSS_METHODS: dict[str, tuple[str, bool]] = {
    "stratified t": ("stratified t intervals from the seeds' paired differences", False),
    "stratified expanded percentile": ("stratified expanded percentile bootstrap intervals", True),
}


def resampling(methods: Iterable[str], resamples: int, seed: int) -> str:
    """``10000 resamples, seed 0`` when any of these interval methods (tables' ``method``
    labels) drew bootstrap resamples, else ``no resampling``."""
    from fewshot.stats.aggregate import METHOD as AGGREGATE_METHOD

    known = {**CELL_METHODS, **ACROSS_METHODS, AGGREGATE_METHOD: ("", True)}
    drew = any(known.get(m, ("", True))[1] for m in methods)  # an unknown label: assume it did
    return f"{resamples} resamples, seed {seed}" if drew else "no resampling"


def level(confidence: float) -> str:
    """A confidence level as a percentage: ``95%``, ``97.5%``."""
    return f"{confidence * 100:g}%"


def seed_count(seeds: pd.Series) -> str:
    """``6 seeds``, or ``between 3 and 6 seeds`` when the rows differ."""
    lo, hi = int(seeds.min()), int(seeds.max())
    return f"{lo} seed{'s' if lo != 1 else ''}" if lo == hi else f"between {lo} and {hi} seeds"


def _methods_of(table: pd.DataFrame, known: dict[str, tuple[str, bool]]) -> list[str]:
    return [m for m in dict.fromkeys(table["method"].dropna()) if m in known] if len(table) else []


def _described(
    methods: list[str], known: dict[str, tuple[str, bool]], resampled: str, rep: StudyReports
) -> str:
    """The methods of one table in words; resamples named only for methods that draw them."""
    s = rep.settings
    parts = []
    for m in methods:
        what, resamples = known[m]
        if resamples:
            what += (
                f" from {s.resamples} bootstrap resamples of {resampled} (resampling seed {s.seed})"
            )
        else:
            what += " (no resampling)"
        parts.append(what)
    return "; ".join(parts)


def methods_sentences(rep: StudyReports) -> dict[str, str]:
    """The methods text of a report, one sentence (or two) per topic, in reading order.

    Topics: ``score``, ``cells``, ``cell coverage``, ``aggregates``, ``direction``, ``units``,
    ``differences``, ``measures``, ``printed coverage``, ``bounds``, ``unfinished`` (each only
    when it applies).
    """
    curves, cmp, s = rep.curves, rep.compare, rep.settings
    t = curves.table
    rule = curves.scores.rule
    metric = curves.scores.metric
    out: dict[str, str] = {}
    rule_text = (
        "the final evaluation of each run (its last reported step when it reported no final one)"
        if rule == "final"
        else f"the step chosen by the rule {rule} (the same rule for every arm)"
    )
    out["score"] = f"Each run was scored by {metric} at {rule_text}."
    replicates = len(t) and int(t["n_replicates"].max()) > 1
    seeds = "whole seeds" + (", replicates resampled within each drawn seed" if replicates else "")
    cells = _methods_of(t, CELL_METHODS)
    out["cells"] = (
        f"Curve points are the {s.estimator} over seeds (one seed = one nested draw of training "
        f"episodes, shared by every arm) with {level(s.confidence)} "
        f"{_described(cells, CELL_METHODS, seeds, rep)}; {seed_count(t['n_seeds'])} stand behind "
        "each interval."
    )
    n_min = int(t["n_seeds"].min())
    coverage = [
        coverage_sentence("t" if m == "t (bootstrap SE)" else m, n_min)
        for m in cells
        if s.estimator == "mean"
    ]
    if s.estimator != "mean":
        coverage = [f"Coverage was measured for intervals of the mean, not of the {s.estimator}."]
    if s.confidence != MEASURED_LEVEL:
        coverage.append(
            f"These coverages are of nominal {level(MEASURED_LEVEL)} intervals; the tables show "
            f"{level(s.confidence)} intervals."
        )
    out["cell coverage"] = " ".join(coverage)
    agg = rep.aggregate
    if agg is not None and len(agg.table):
        out["aggregates"] = (
            "Aggregates over tasks pool the normalised scores of all runs; their intervals are "
            f"{level(s.confidence)} stratified t intervals: the standard error from "
            f"{s.resamples} stratified bootstrap resamples (seeds resampled within each task, each "
            "task's resample rescaled by sqrt(n/(n-1)); resampling seed "
            f"{s.seed}) and Satterthwaite's degrees of freedom; "
            f"{seed_count(agg.table['n_seeds'])} per task stand behind each interval."
        )
    if not curves.scores.higher_is_better:
        out["direction"] = (
            f"Lower {metric} is better: every statistic was computed on normalised scores (0 at "
            "the floor, 1 at the expert) or, for tasks without them, on the negated raw score, so "
            "that higher is better throughout; raw values are shown back in the metric's own units."
        )
    if cmp is not None:
        out.update(_comparison(rep, cmp))
    if cmp is not None or "aggregates" in out:  # the kinds the harness measured, as quoted
        shown = cmp.table if cmp is not None and len(cmp.table) else t
        out["printed coverage"] = printed_sentence(int(shown["n_seeds"].min()))
    out.update(_qualified(rep))
    return out


def _comparison(rep: StudyReports, cmp: Any) -> dict[str, str]:
    s = rep.settings
    out: dict[str, str] = {}
    if cmp.value != "normalised":
        out["units"] = (
            "Tasks without floor and expert are compared in raw units and left out of every mean "
            "over tasks."
        )
    t = cmp.table
    per_task = t[t["task"] != "all"]
    across = t[t["task"] == "all"]
    text = (
        f"Arms were compared with {cmp.baseline} on the same subsets, paired by seed: differences "
        f"per task have {level(s.confidence)} "
        f"{_described(_methods_of(per_task, CELL_METHODS), CELL_METHODS, 'whole seeds, each pair kept together', rep)}"
    )
    if len(across):
        text += (
            f"; means over tasks have {level(s.confidence)} "
            f"{_described(_methods_of(across, ACROSS_METHODS), ACROSS_METHODS, 'seeds within each task', rep)}"
        )
    if len(per_task):
        text += f"; {seed_count(per_task['n_seeds'])} stand behind each difference"
    out["differences"] = text + "."
    out["measures"] = (
        "Effective data transferred is read off an isotonic fit of the baseline's curve on log size "
        "(Hernandez et al. 2021); probability of improvement counts ties as one half (Agarwal et al. "
        "2021) and gets Newcombe's (2006) score interval per task (one-sided where one side cannot "
        "reject), combined over tasks by MOVER (Zou and Donner 2008); the fraction of tasks above "
        "the threshold is an estimate without an interval. Intervals of effective data and of "
        "episodes to the threshold are the sizes at which a paired t test over seeds does not tell "
        "the two curves (or the curve and the threshold) apart; areas get Student's t over seeds' "
        "areas (none of these resample). Words such as 'hurts', 'helps', '>=', 'already there' and "
        "'not reached' are printed only where the interval supports them."
    )
    return out


def _tables(rep: StudyReports) -> list[pd.DataFrame]:
    tables = [r.table for r in (rep.curves, rep.normalised_curves, rep.aggregate) if r is not None]
    if rep.compare is not None:
        tables += [rep.compare.table, rep.compare.areas, rep.compare.scaling]
    return tables


def _qualified(rep: StudyReports) -> dict[str, str]:
    out: dict[str, str] = {}
    study = rep.data.study
    tables = _tables(rep)
    bounds = study.get("bounds")
    if bounds is not None:
        clipped = [t for t in tables if CLIPPED_COLUMN in t]
        n = sum(clipped_count(t) for t in clipped)
        total = sum(int(t[["low", "high"]].notna().any(axis=1).sum()) for t in clipped)
        lo, hi = bounds
        out["bounds"] = (
            f"The study declares that {study['metric']} lies in [{lo:g}, {hi:g}]. Intervals were "
            f"clipped to what that allows: cells to [{lo:g}, {hi:g}], normalised cells, aggregates, "
            "areas and the scaling view's IQMs to that range in normalised units (the widest over the tasks pooled), and "
            f"differences to [{lo - hi:g}, {hi - lo:g}] (in normalised units per task where "
            f"normalised); {n} of {total} intervals were clipped."
        )
    late = [t for t in tables if UNFINISHED_COLUMN in t]
    if late:
        n = sum(int((t[UNFINISHED_COLUMN] > 0).sum()) for t in late)
        out["unfinished"] = (
            "Results of runs not yet done (running, claimed, failed or planned) were counted on "
            f"request; {n} value(s) include them and are marked *: they may change when those runs "
            "finish."
        )
    return out
