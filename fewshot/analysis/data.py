"""A study read from its ledger once: the one in-memory object every report is computed from.

:func:`read_study` is the only place the study-level reports touch a ledger. It reads the study's
settings, arms, tasks, runs, results and completion once; :func:`study_scores` turns the results
into run scores by a score rule, and everything downstream (curves, comparisons, seeds, figures,
the HTML report) works on those, never on the ledger.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import pandas as pd

from fewshot.errors import InvalidInput
from fewshot.stats import orient, parse_rule, run_scores

if TYPE_CHECKING:
    from fewshot.ledger import Ledger

__all__ = ["StudyData", "StudyScores", "read_study", "study_scores", "score_tables", "load_scores"]


@dataclass(frozen=True)
class StudyData:
    """Everything the reports need from a ledger, read in one pass.

    Attributes
    ----------
    study : dict
        The study's stored settings (name, metric, higher_is_better, baseline, replicates, ...).
    arms, tasks, runs, results : DataFrame
        :meth:`Ledger.arms`, :meth:`Ledger.tasks`, :meth:`Ledger.runs` and :meth:`Ledger.results`
        (results of done runs only, unless read with ``include_running``; column ``run_status``).
    status : object or None
        :meth:`Ledger.status` (the completion), when read with ``with_status=True``.
    url : str
        The ledger's URL with any password masked, as the report's subtitle shows it.
    """

    study: dict[str, Any]
    arms: pd.DataFrame
    tasks: pd.DataFrame
    runs: pd.DataFrame
    results: pd.DataFrame
    status: Any = None
    url: str = ""

    @property
    def arm_order(self) -> list[str]:
        """Arms in the study file's order (the order of every table and figure)."""
        return list(self.arms["arm"])

    @property
    def roles(self) -> dict[str, str]:
        """Each arm's role (``baseline``, ``pretrained``, ...)."""
        return dict(zip(self.arms["arm"], self.arms["role"], strict=True))


def read_study(
    ledger: Ledger, *, with_status: bool = False, include_running: bool = False
) -> StudyData:
    """Read a study's data from ``ledger`` once (its result table once, twice ``with_status``).

    A run's score comes only from a finished run: ``results`` holds the results of done runs,
    never a void one. With ``include_running`` it also holds those of runs not done (planned,
    running or failed), and its ``run_status`` column says which, so that they can be shown
    marked as such.
    """
    return StudyData(
        study=ledger.study_row(),
        arms=ledger.arms(),
        tasks=ledger.tasks(),
        runs=ledger.runs(),
        results=ledger.results(include_running=include_running),
        status=ledger.status() if with_status else None,
        url=str(ledger.url),
    )


def as_study_data(source: Ledger | StudyData) -> StudyData:
    """``source`` itself when it is already read, else :func:`read_study` of it."""
    return source if isinstance(source, StudyData) else read_study(source)


@dataclass(frozen=True)
class StudyScores:
    """Run scores of a study with what produced them.

    Attributes
    ----------
    scores : DataFrame
        :func:`fewshot.stats.run_scores` columns plus :func:`fewshot.stats.orient`'s ``normalised``,
        ``reference``, ``oriented`` and ``value`` (every statistic reads those: higher is better).
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


def study_scores(
    data: StudyData, *, metric: str | None = None, select: str = "final"
) -> StudyScores:
    """Run scores of a study read by :func:`read_study`, by the ``select`` rule."""
    study = data.study
    metric = metric or study["metric"]
    rule = parse_rule(select)
    if data.results.empty:
        raise InvalidInput(
            f"study {study['name']!r} has no results of done runs yet (statistics count only runs "
            "marked done, with their final evaluation). Run trainers (fewshot work) or ingest "
            "results; `include_running` shows the results of unfinished runs, marked."
        )
    return score_tables(
        data.results,
        data.tasks,
        metric=metric,
        higher_is_better=bool(study["higher_is_better"]),
        select=str(rule),
    )


def load_scores(
    source: Ledger | StudyData, *, metric: str | None = None, select: str = "final"
) -> StudyScores:
    """:func:`study_scores` of a ledger (read once) or of a study already read."""
    return study_scores(as_study_data(source), metric=metric, select=select)


def score_tables(
    results: pd.DataFrame,
    tasks: pd.DataFrame,
    *,
    metric: str,
    higher_is_better: bool,
    select: str = "final",
) -> StudyScores:
    """Run scores from a results table (:meth:`Ledger.results` columns) and a tasks table (task,
    floor, expert): :func:`study_scores` from bare tables."""
    rule = parse_rule(select)
    scores = run_scores(results, metric, rule)
    # the metric's direction is applied here, once: everything downstream reads higher-is-better
    normed = orient(scores, tasks, higher_is_better=higher_is_better)
    raw = tuple(sorted(set(tasks.loc[tasks["floor"].isna() | tasks["expert"].isna(), "task"])))
    return StudyScores(normed, metric, str(rule), higher_is_better, raw)
