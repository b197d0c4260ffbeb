"""A study as frozen dataclasses: arms, tasks (each holding its draw settings), the planned runs
and their counts. Reading a study file into these is :mod:`fewshot.study.loader`."""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path

from fewshot.errors import FewshotError
from fewshot.sampling.task import DrawSettings, DrawSpec
from fewshot.schema import MIN_TRUSTED_SEEDS

__all__ = ["Arm", "PlanCounts", "RunSpec", "Study", "StudyError", "Task", "run_key"]


class StudyError(FewshotError, ValueError):
    """A study file is malformed or breaks a rule."""


@dataclass(frozen=True)
class Arm:
    """One condition of the study.

    Attributes
    ----------
    name : str
    role : str
        ``"pretrained"`` or ``"baseline"``.
    checkpoint : str or None
        Where the arm's starting weights are (free text for the trainer).
    zero_shot : bool
        Whether size 0 (no fine-tuning) is planned for this arm.
    attributes : mapping of str to float or str
        Free numbers (e.g. a parameter count for a scaling view) or text (e.g. a recipe name);
        the trainer receives them as JSON.
    """

    name: str
    role: str
    checkpoint: str | None = None
    zero_shot: bool = False
    attributes: Mapping[str, float | str] = field(default_factory=dict)


@dataclass(frozen=True)
class Task(DrawSettings):
    """A held-out target task and how its subsets are drawn.

    Attributes
    ----------
    name : str
    pool : pathlib.Path
        The pool file (absolute, resolved against the study file).
    id_column, keep_top, rank_by, lowest_first, stratify_by, allocation, reserve, exclude
        Draw settings, keyword-only (see :class:`fewshot.sampling.task.DrawSettings`).
    floor, expert : float or None
        Reference scores for normalised scores.
    group : str or None
        Task group for aggregates.
    """

    name: str
    pool: Path
    floor: float | None = None
    expert: float | None = None
    group: str | None = None

    def draw_spec(self, sizes: tuple[int, ...], seeds: tuple[int, ...]) -> DrawSpec:
        """The sampler's settings for this task."""
        return DrawSpec(self.name, self.pool, sizes, seeds, **self.draw_settings())


@dataclass(frozen=True)
class RunSpec:
    """One planned fine-tuning run: (arm, task, size, seed, replicate).

    Attributes
    ----------
    key : str
        ``arm/task/n<size>/s<seed>`` (``/r<replicate>`` when the study has replicates).
    """

    key: str
    arm: str
    task: str
    size: int
    seed: int
    replicate: int


def run_key(arm: str, task: str, size: int, seed: int, replicate: int, replicates: int) -> str:
    """The run key of DESIGN.md: ``arm/task/n<size>/s<seed>[/r<replicate>]``."""
    key = f"{arm}/{task}/n{size}/s{seed}"
    return f"{key}/r{replicate}" if replicates > 1 else key


@dataclass(frozen=True)
class PlanCounts:
    """How many runs a study plans, per arm and task and per size.

    Attributes
    ----------
    sizes : tuple of int
        The study's sizes (the columns of ``cells``).
    cells : dict
        ``(arm, task)`` -> runs per size, in the order of ``sizes`` (0 where none, e.g. size 0
        of an arm that is not zero-shot), for every arm x task of the study.
    total : int
        All planned runs.
    few_seeds : bool
        True when the study has fewer than :data:`fewshot.schema.MIN_TRUSTED_SEEDS` seeds, too
        few per cell for a confidence interval to be trusted.
    """

    sizes: tuple[int, ...]
    cells: dict[tuple[str, str], tuple[int, ...]]
    total: int
    few_seeds: bool


@dataclass(frozen=True)
class Study:
    """A parsed study file.

    Attributes
    ----------
    name, metric, higher_is_better, sizes, seeds, replicates, baseline
        As in the file; sizes and seeds are sorted.
    arms, tasks : tuple
    path : pathlib.Path
        The study file.
    draws_dir : pathlib.Path
        Where subset id files are written (``draws/<study>`` beside the file by default).
    metrics : tuple of str
        Every metric a result may carry: the primary ``metric`` first, then the file's
        ``metrics`` list in its order (results for any other metric are refused unless the
        writer asks for a new one).
    bounds : tuple of two floats or None
        The range the primary metric can take (e.g. ``(0.0, 1.0)`` for an accuracy); intervals
        are clipped to it. ``None``: unbounded.
    caution : str or None
        The study's own caution for the report, replacing the default one.
    """

    name: str
    metric: str
    higher_is_better: bool
    sizes: tuple[int, ...]
    seeds: tuple[int, ...]
    replicates: int
    baseline: str
    arms: tuple[Arm, ...]
    tasks: tuple[Task, ...]
    path: Path
    draws_dir: Path
    metrics: tuple[str, ...] = ()
    bounds: tuple[float, float] | None = None
    caution: str | None = None

    def __post_init__(self) -> None:
        rest = tuple(m for m in self.metrics if m != self.metric)
        object.__setattr__(self, "metrics", (self.metric, *rest))

    def arm(self, name: str) -> Arm:
        """The arm called ``name``."""
        return next(a for a in self.arms if a.name == name)

    def task(self, name: str) -> Task:
        """The task called ``name``."""
        return next(t for t in self.tasks if t.name == name)

    def runs(self) -> Iterator[RunSpec]:
        """Every planned run: arms × tasks × sizes × seeds × replicates (size 0 only for zero-shot arms)."""
        for arm in self.arms:
            for task in self.tasks:
                for size in self.sizes:
                    if size == 0 and not arm.zero_shot:
                        continue
                    for seed in self.seeds:
                        for r in range(self.replicates):
                            yield RunSpec(
                                run_key(arm.name, task.name, size, seed, r, self.replicates),
                                arm.name,
                                task.name,
                                size,
                                seed,
                                r,
                            )

    def plan_counts(self) -> PlanCounts:
        """Runs per arm, task and size (what ``fewshot check`` prints), counted from :meth:`runs`."""
        counts: dict[tuple[str, str, int], int] = {}
        for r in self.runs():
            counts[(r.arm, r.task, r.size)] = counts.get((r.arm, r.task, r.size), 0) + 1
        cells = {
            (a.name, t.name): tuple(counts.get((a.name, t.name, n), 0) for n in self.sizes)
            for a in self.arms
            for t in self.tasks
        }
        return PlanCounts(
            self.sizes,
            cells,
            sum(counts.values()),
            len(self.seeds) < MIN_TRUSTED_SEEDS,
        )

    def plan_dict(self) -> dict[str, object]:
        """The plan as JSON-ready data (what ``fewshot check --format json`` prints): study,
        arms, tasks, sizes, seeds, replicates, runs (the count) and keys (every run key)."""
        runs = list(self.runs())
        return {
            "study": self.name,
            "arms": [a.name for a in self.arms],
            "tasks": [t.name for t in self.tasks],
            "sizes": list(self.sizes),
            "seeds": list(self.seeds),
            "replicates": self.replicates,
            "runs": len(runs),
            "keys": [r.key for r in runs],
        }
