"""How many seeds each comparison with the baseline needs, from the spread seen so far."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import pandas as pd

from fewshot.analysis.data import StudyData, StudyScores, study_scores
from fewshot.analysis.qualify import RUN_IDS, _unfinished, study_data
from fewshot.errors import InvalidInput

if TYPE_CHECKING:
    from fewshot.ledger import Ledger

__all__ = ["SeedsReport", "seeds_needed_report", "seeds_report"]


@dataclass(frozen=True)
class SeedsReport:
    """Seeds per arm each (arm, task, size) comparison needs to detect ``effect``.

    Attributes
    ----------
    table : DataFrame
        :func:`fewshot.stats.power.seeds_table` columns (arm, task, size, pilot_seeds, sd_arm,
        sd_baseline, power_now, seeds_needed; None: more than 10,000).
    baseline : str
    effect, power, alpha : float
    value : str
        ``normalised``: the unit of ``effect``.
    rule : str
        The score rule.
    notes : list of str
    """

    table: pd.DataFrame
    baseline: str
    effect: float
    power: float
    alpha: float
    value: str
    rule: str
    notes: list[str]


def seeds_needed_report(
    source: Ledger | StudyData,
    *,
    effect: float = 0.1,
    power: float = 0.8,
    alpha: float = 0.05,
    baseline: str | None = None,
    select: str = "final",
    include_running: bool = False,
) -> SeedsReport:
    """Seeds each comparison with ``baseline`` (the study's by default) needs to detect ``effect``
    (a normalised difference) by a one-sided Welch t test of level ``alpha`` with ``power``.

    ``source`` is a ledger (read once: done runs only, or every run's results with
    ``include_running``, for a pilot still under way; a note then counts the unfinished runs) or a
    study already read by :func:`read_study`.
    """
    data = study_data(source, include_running=include_running)
    sc = study_scores(data, select=select)
    base = baseline or data.study["baseline"]
    table, notes = seeds_report(sc, base, effect=effect, power=power, alpha=alpha)
    if table.empty:
        raise InvalidInput(
            f"no comparison with {base!r} has 2 or more seeds on both sides yet: nothing to estimate from."
        )
    notes.append(
        f"a pilot of {int(table['pilot_seeds'].min())} seed(s) underestimates the spread more often "
        "than not; treat these counts as a floor"
    )
    unfinished = _unfinished(data, sc.scores)  # the score rows of runs not done (None: no such)
    if unfinished is not None:
        late = len(unfinished.drop_duplicates(RUN_IDS))
        if late:
            notes.append(
                f"{late} run(s) not yet done are included (`include_running`): their results may "
                "change or vanish when they finish, fail or are retried, and the spreads with them"
            )
    return SeedsReport(table, base, effect, power, alpha, "normalised", sc.rule, notes)


def seeds_report(
    sc: StudyScores, baseline: str, *, effect: float, power: float = 0.8, alpha: float = 0.05
) -> tuple[pd.DataFrame, list[str]]:
    """Seeds each comparison needs to detect ``effect`` (normalised), with notes.

    Only tasks with floor and expert count: ``effect`` is a normalised difference, and raw units
    differ from task to task. Refused when no task has floor and expert.
    """
    from fewshot.stats.power import seeds_table

    refs = sorted(set(sc.scores.loc[sc.scores["reference"] == "floor/expert", "task"]))
    if not refs:
        raise InvalidInput(
            "no task has floor and expert, so a normalised effect means nothing here: add floor and "
            "expert to the tasks in the study file."
        )
    normed = sc.scores[sc.scores["task"].isin(refs)]
    table = seeds_table(
        normed, baseline, effect=effect, power=power, alpha=alpha, value="normalised"
    )
    notes = []
    left = sorted(set(sc.scores["task"]) - set(refs))
    if left:
        notes.append(f"tasks without floor/expert are left out: {', '.join(left)}")
    return table, notes
