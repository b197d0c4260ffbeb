"""Curves of a study: per task, across tasks or per task group, with the caveats that apply.

Computed from a :class:`~fewshot.analysis.data.StudyData` (or a ledger, read once); tables,
figures and the report draw from the :class:`CurveReport` without computing again.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import pandas as pd

from fewshot.analysis.data import StudyData, StudyScores, study_scores
from fewshot.analysis.qualify import qualify_curves, study_data
from fewshot.errors import InvalidInput
from fewshot.stats import CurveSettings, aggregate_curves, curves, to_metric_units
from fewshot.stats.curves import FEW_SEEDS

if TYPE_CHECKING:
    from fewshot.ledger import Ledger

__all__ = ["CurveReport", "curve_report", "curve_scores", "caveats", "BOTH_AGGREGATES"]

BOTH_AGGREGATES = "choose one of `across_tasks` and `by_group`."


@dataclass(frozen=True)
class CurveReport:
    """A curves table with its settings and the warnings that apply.

    Attributes
    ----------
    table : DataFrame
        :data:`fewshot.stats.CURVE_COLUMNS`, or :data:`fewshot.stats.AGGREGATE_COLUMNS` for aggregates.
    kind : str
        ``per-task``, ``across-tasks`` or ``by-group``.
    value : str
        ``score`` or ``normalised``.
    settings : CurveSettings
    scores : StudyScores
    notes : list of str
    """

    table: pd.DataFrame
    kind: str
    value: str
    settings: CurveSettings
    scores: StudyScores
    notes: list[str] = field(default_factory=list)


def curve_report(
    source: Ledger | StudyData,
    settings: CurveSettings,
    *,
    metric: str | None = None,
    select: str = "final",
    normalised: bool = False,
    across_tasks: bool = False,
    by_group: bool = False,
    include_running: bool = False,
) -> CurveReport:
    """Curves of a study (per task, or aggregated across tasks or per task group).

    ``source`` is a ledger (read once: results of done runs, or of every run with
    ``include_running``) or a study already read by :func:`read_study`. Intervals are clipped to
    the study's bounds and values that include unfinished runs are marked
    (:func:`fewshot.analysis.qualify.qualify_curves`).
    """
    if across_tasks and by_group:
        raise InvalidInput(BOTH_AGGREGATES)
    settings.check()
    data = study_data(source, include_running=include_running)
    sc = study_scores(data, metric=metric, select=select)
    report = curve_scores(
        sc,
        settings,
        normalised=normalised,
        across_tasks=across_tasks,
        by_group=by_group,
        arms=data.arm_order,
    )
    return qualify_curves(report, data)


def curve_scores(
    sc: StudyScores,
    settings: CurveSettings,
    *,
    normalised: bool = False,
    across_tasks: bool = False,
    by_group: bool = False,
    arms: list[str] | None = None,
) -> CurveReport:
    """:func:`curve_report` on scores already read (no ledger); ``arms`` gives the rows' order."""
    if across_tasks and by_group:
        raise InvalidInput(BOTH_AGGREGATES)
    aggregate = across_tasks or by_group
    value = "normalised" if (normalised or aggregate) else "score"
    if value == "normalised" and not (sc.scores["reference"] == "floor/expert").any():
        raise InvalidInput(
            "no task has both floor and expert, so there are no normalised scores. "
            "Add floor and expert to the tasks in the study file, or ask for raw scores (leave out `normalised`)."
        )
    if aggregate:
        table = aggregate_curves(sc.scores, settings, value="normalised", by_group=by_group)
        kind = "by-group" if by_group else "across-tasks"
    else:
        # raw curves are computed higher-is-better (oriented) and shown in the metric's units
        table = curves(sc.scores, settings, value="normalised" if normalised else "oriented")
        if value == "score":
            table = to_metric_units(table, higher_is_better=sc.higher_is_better)
        kind = "per-task"
    table = in_study_order(table, arms or list(dict.fromkeys(sc.scores["arm"])))
    report = CurveReport(table, kind, value, settings, sc)
    report.notes.extend(caveats(report))
    return report


def in_study_order(table: pd.DataFrame, arms: list[str]) -> pd.DataFrame:
    """Rows in the study file's order of arms (then as they were), as every figure draws them."""
    if table.empty:
        return table
    rank = {a: i for i, a in enumerate(arms)}
    order = table["arm"].map(lambda a: rank.get(a, len(rank)))
    return (
        table.assign(_o=order)
        .sort_values("_o", kind="stable")
        .drop(columns="_o")
        .reset_index(drop=True)
    )


def caveats(report: CurveReport) -> list[str]:
    """Plain statements of where the numbers can mislead."""
    notes = []
    t = report.table
    if len(t):
        n_min, n_max = int(t["n_seeds"].min()), int(t["n_seeds"].max())
        notes.append(
            f"seeds behind each interval: {n_min}" + (f" to {n_max}" if n_max != n_min else "")
        )
        few = t[t["n_seeds"] < FEW_SEEDS]
        if len(few):
            notes.append(
                f"{len(few)} cell(s) rest on fewer than {FEW_SEEDS} seeds: their intervals are not to be trusted (flagged)"
            )
        if report.kind == "per-task" and report.settings.method == "t" and n_min < 10:
            notes.append(
                "t intervals hold 95% for roughly normal seed results; with skewed or two-mode seed results at "
                "3-5 seeds they cover about 90-92% (measured by simulation; see the README)"
            )
        if (
            report.settings.method in ("percentile", "basic", "bca")
            and report.kind == "per-task"
            and n_min < 10
        ):
            notes.append(
                f"plain {report.settings.method} intervals are too narrow below 10 seeds (about 83% coverage at 5)"
            )
    if report.value == "normalised" and report.scores.raw_tasks:
        notes.append(
            f"tasks without floor/expert are left out of normalised scores: {', '.join(report.scores.raw_tasks)}"
        )
    if report.value == "score" and report.scores.raw_tasks:
        notes.append(f"raw scores (no floor/expert) for: {', '.join(report.scores.raw_tasks)}")
    if report.scores.rule != "final":
        notes.append(f"scores chosen by the rule {report.scores.rule}, not the final evaluation")
    return notes
