"""Every report of a study from one read of its ledger: what ``fewshot report`` and the demo show."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from fewshot.analysis.curves import CurveReport, caveats, curve_scores, in_study_order
from fewshot.analysis.data import StudyData, StudyScores, study_scores
from fewshot.analysis.findings import Findings, findings
from fewshot.analysis.qualify import qualify_curves, qualify_study, study_data
from fewshot.analysis.transfer import CompareReport, compare_scores
from fewshot.errors import InvalidInput
from fewshot.stats import CurveSettings, aggregate_curves
from fewshot.stats.progress import advance

if TYPE_CHECKING:
    from fewshot.ledger import Ledger

__all__ = ["StudyReports", "analyse_study", "compare_findings"]


@dataclass(frozen=True)
class StudyReports:
    """A study's data and each of its reports, computed once.

    Attributes
    ----------
    data : StudyData
        The one read of the ledger (with its completion).
    scores : StudyScores
    settings : CurveSettings
    curves : CurveReport
        Per-task curves in the metric's units (the report's table).
    normalised_curves : CurveReport or None
        Per-task curves of normalised scores, when every task has floor and expert.
    aggregate : CurveReport or None
        The across-task interquartile mean (the aggregate the report shows), when every task
        has floor and expert.
    compare : CompareReport or None
        Every arm against the baseline; None when the comparison was refused, with the reason in
        ``compare_error``.
    compare_error : str or None
    """

    data: StudyData
    scores: StudyScores
    settings: CurveSettings
    curves: CurveReport
    normalised_curves: CurveReport | None
    aggregate: CurveReport | None
    compare: CompareReport | None
    compare_error: str | None = None

    @property
    def normalised(self) -> bool:
        """Whether every task has floor and expert (so figures show normalised scores)."""
        return self.normalised_curves is not None

    @property
    def figure_curves(self) -> CurveReport:
        """The curves the figure draws: normalised where every task allows it."""
        return self.normalised_curves or self.curves


def analyse_study(
    source: Ledger | StudyData,
    settings: CurveSettings,
    *,
    select: str = "final",
    baseline: str | None = None,
    threshold: float = 0.8,
    include_running: bool = False,
) -> StudyReports:
    """Read the study once (``source``: a ledger, or a study read by :func:`read_study` with its
    status) and compute its curves, aggregates and comparison once each (``include_running``:
    results of runs not yet done count too, marked; see :mod:`fewshot.analysis.qualify`)."""
    settings.check()
    data = study_data(source, include_running=include_running, with_status=True)
    if data.status is None:
        raise InvalidInput(
            "source must be read with its completion: read_study(ledger, with_status=True)."
        )
    sc = study_scores(data, select=select)
    arms = data.arm_order
    stage = "report statistics"
    steps = 2 if sc.raw_tasks else 4
    advance(stage, 0, steps)
    curves = curve_scores(sc, settings, arms=arms)
    advance(stage, 1, steps)
    normalised_curves = aggregate = None
    if not sc.raw_tasks:
        normalised_curves = curve_scores(sc, settings, normalised=True, arms=arms)
        advance(stage, 2, steps)
        aggregate = _iqm_over_tasks(sc, settings, arms)
        advance(stage, 3, steps)
    cmp, error = None, None
    try:
        cmp = compare_scores(
            sc,
            settings,
            baseline=baseline or data.study["baseline"],
            threshold=threshold,
            arm_table=data.arms,
            iqm=None if aggregate is None else aggregate.table,  # not computed again
        )
    except InvalidInput as exc:
        error = str(exc)
    advance(stage, steps, steps)
    reports = StudyReports(data, sc, settings, curves, normalised_curves, aggregate, cmp, error)
    return qualify_study(reports)


def _iqm_over_tasks(sc: StudyScores, settings: CurveSettings, arms: list[str]) -> CurveReport:
    """The across-task curves the report shows: the interquartile mean only (the figure and the
    findings read nothing else), the same rows :func:`curve_scores` gives for it."""
    table = aggregate_curves(sc.scores, settings, value="normalised", aggregates=("iqm",))
    report = CurveReport(in_study_order(table, arms), "across-tasks", "normalised", settings, sc)
    report.notes.extend(caveats(report))
    return report


def compare_findings(compare: CompareReport, data: StudyData) -> Findings:
    """The findings summary of one comparison (what ``fewshot compare`` prints above its tables):
    ``compare`` read with the across-task IQM, the only aggregate the findings quote, computed
    when the comparison is of normalised scores over two tasks or more. ``data`` is the study
    ``compare`` was computed from (its bounds, unfinished runs and arm order)."""
    aggregate = None
    if compare.value == "normalised" and len(compare.over_tasks) > 1:
        iqm = _iqm_over_tasks(compare.scores, compare.settings, data.arm_order)
        aggregate = qualify_curves(iqm, data)
    return findings(compare, aggregate, arm_order=data.arm_order)
