"""Studies: the study file read into frozen dataclasses (:mod:`~fewshot.study.loader`), its arms,
tasks and planned runs (:mod:`~fewshot.study.model`), and a study checked without a ledger."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from fewshot.study.loader import load_study
from fewshot.study.model import Arm, PlanCounts, RunSpec, Study, StudyError, Task, run_key

__all__ = [
    "Arm",
    "PlanCounts",
    "RunSpec",
    "Study",
    "StudyError",
    "Task",
    "check_study",
    "draw_study",
    "load_study",
    "run_key",
]

if TYPE_CHECKING:
    from fewshot.sampling.task import TaskDraw


def draw_study(study: Study) -> dict[str, TaskDraw]:
    """Draw every task of ``study`` in memory (where pool and size errors surface); no file is
    written. Returns task name -> :class:`~fewshot.sampling.task.TaskDraw`."""
    from fewshot.sampling.task import draw_task

    return {t.name: draw_task(t.draw_spec(study.sizes, study.seeds)) for t in study.tasks}


def check_study(path: str | Path) -> Study:
    """Load the study file at ``path`` and draw its subsets in memory, touching no ledger and
    writing nothing (``fewshot check``). Its plan is :meth:`Study.plan_counts`."""
    study = load_study(path)
    draw_study(study)
    return study
