"""From a ledger to statistics tables: the glue the curves, compare and report commands share.

The statistics layer (``fewshot.stats``) never touches the ledger; this module reads the
ledger's tidy tables and hands DataFrames to it, recording every setting used.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

from fewshot.errors import InvalidInput
from fewshot.ledger import Ledger
from fewshot.stats import CurveSettings, aggregate_curves, curves, normalise, parse_rule, run_scores

__all__ = ["StudyScores", "CurveReport", "load_scores", "curve_report", "caveats"]


@dataclass(frozen=True)
class StudyScores:
    """Run scores of a study with what produced them.

    Attributes
    ----------
    scores : DataFrame
        :func:`fewshot.stats.run_scores` columns plus ``normalised`` and ``reference``.
    metric, rule : str
    higher_is_better : bool
    raw_tasks : tuple of str
        Tasks without floor and expert (no normalised scores).
    """

    scores: pd.DataFrame
    metric: str
    rule: str
    higher_is_better: bool
    raw_tasks: tuple[str, ...]


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


def load_scores(ledger: Ledger, *, metric: str | None = None, select: str = "final") -> StudyScores:
    """Read the ledger's results and turn them into run scores by the ``select`` rule."""
    study = ledger.study_row()
    metric = metric or study["metric"]
    rule = parse_rule(select)
    results = ledger.results()
    if results.empty:
        raise InvalidInput(
            f"study {study['name']!r} has no results yet. Run trainers (fewshot exec) or ingest results first."
        )
    scores = run_scores(results, metric, rule)
    tasks = ledger.tasks()
    normed = normalise(scores, tasks, higher_is_better=bool(study["higher_is_better"]))
    raw = tuple(sorted(set(tasks.loc[tasks["floor"].isna() | tasks["expert"].isna(), "task"])))
    return StudyScores(normed, metric, str(rule), bool(study["higher_is_better"]), raw)


def curve_report(
    ledger: Ledger,
    settings: CurveSettings,
    *,
    metric: str | None = None,
    select: str = "final",
    normalised: bool = False,
    across_tasks: bool = False,
    by_group: bool = False,
) -> CurveReport:
    """Curves of a study (per task, or aggregated across tasks or per task group)."""
    if across_tasks and by_group:
        raise InvalidInput("choose one of --across-tasks and --by-group.")
    settings.check()
    sc = load_scores(ledger, metric=metric, select=select)
    aggregate = across_tasks or by_group
    value = "normalised" if (normalised or aggregate) else "score"
    if value == "normalised" and sc.raw_tasks:
        if len(sc.raw_tasks) == sc.scores["task"].nunique():
            raise InvalidInput(
                "no task has both floor and expert, so there are no normalised scores. "
                "Add floor and expert to the tasks in the study file, or drop --normalised."
            )
    if aggregate:
        table = aggregate_curves(sc.scores, settings, value="normalised", by_group=by_group)
        kind = "by-group" if by_group else "across-tasks"
    else:
        table = curves(sc.scores, settings, value=value)
        kind = "per-task"
    report = CurveReport(table, kind, value, settings, sc)
    report.notes.extend(caveats(report))
    return report


def caveats(report: CurveReport) -> list[str]:
    """Plain statements of where the numbers can mislead."""
    notes = []
    t = report.table
    if len(t):
        n_min, n_max = int(t["n_seeds"].min()), int(t["n_seeds"].max())
        notes.append(
            f"seeds behind each interval: {n_min}" + (f" to {n_max}" if n_max != n_min else "")
        )
        few = t[t["n_seeds"] < 3]
        if len(few):
            notes.append(
                f"{len(few)} cell(s) rest on fewer than 3 seeds: their intervals are not to be trusted (flagged)"
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
