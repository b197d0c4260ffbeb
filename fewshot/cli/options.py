"""The options the analysis commands share, each defined once.

``curves``, ``compare``, ``summary``, ``plot`` and ``report`` take the same statistics options
(score rule, estimator, interval method, confidence, resamples, resampling seed, whether results
of unfinished runs count, and for some the metric). Each is an ``Annotated`` alias here, with its
default in :data:`SHARED`; :func:`statistics_options` adds them to a command's signature and hands
the command one :class:`StatsOptions`, so no command repeats the block.
"""

from __future__ import annotations

import functools
import inspect
import typing
from collections.abc import Callable
from dataclasses import dataclass
from enum import StrEnum
from typing import TYPE_CHECKING, Annotated, Any

import typer

from fewshot.schema import DEFAULT_INTERVAL_METHOD, INTERVAL_METHODS

if TYPE_CHECKING:
    from fewshot.stats import CurveSettings

__all__ = [
    "ESTIMATOR_NAMES",
    "Estimator",
    "IntervalMethod",
    "StatsOptions",
    "statistics_options",
    "MetricOpt",
    "SelectOpt",
    "EstimatorOpt",
    "CiOpt",
    "ConfidenceOpt",
    "ResamplesOpt",
    "SeedOpt",
    "IncludeRunningOpt",
    "BaselineOpt",
    "ThresholdOpt",
    "STATS_FLAGS",
]

#: The statistics library's parameters (named in backticks in its messages) -> these commands'
#: flags, for :func:`fewshot.cli.common.reporting`.
STATS_FLAGS = {
    "method": "--ci",
    "estimator": "--estimator",
    "confidence": "--confidence",
    "resamples": "--resamples",
    "select": "--select",
    "kind": "--kind",
    "threshold": "--threshold",
    "across_tasks": "--across-tasks",
    "by_group": "--by-group",
    "normalised": "--normalised",
    "effect": "--effect",
    "power": "--power",
    "alpha": "--alpha",
    "workers": "--workers",
    "path": "--out",
    "include_running": "--include-running",
}

ESTIMATOR_NAMES = ("mean", "median", "iqm")  # fewshot.stats.ESTIMATORS (a test holds them equal)


class Estimator(StrEnum):
    mean = "mean"
    median = "median"
    iqm = "iqm"


# the interval methods by name (help lists them; a test holds them equal to the library's list)
IntervalMethod = StrEnum("IntervalMethod", [(m, m) for m in INTERVAL_METHODS])  # type: ignore[misc]

MetricOpt = Annotated[
    str | None, typer.Option("--metric", help="Metric to score runs by (default: the study's).")
]
SelectOpt = Annotated[
    str,
    typer.Option(
        "--select", help="Score rule: final, best:<val metric>, least:<val metric>, last:<k>."
    ),
]
EstimatorOpt = Annotated[Estimator, typer.Option("--estimator", help="Estimator over seeds.")]
CiOpt = Annotated[IntervalMethod, typer.Option("--ci", help="Interval method.")]
ConfidenceOpt = Annotated[
    float, typer.Option("--confidence", help="Confidence level of the intervals.")
]
ResamplesOpt = Annotated[int, typer.Option("--resamples", help="Bootstrap resamples.")]
SeedOpt = Annotated[
    int, typer.Option("--seed", help="Seed of the resampling (results are reproducible).")
]
IncludeRunningOpt = Annotated[
    bool,
    typer.Option(
        "--include-running",
        help="Count results of runs not yet done (running, failed, planned) too; the values "
        "they enter are marked *.",
    ),
]
BaselineOpt = Annotated[
    str | None, typer.Option("--baseline", help="The arm to compare with (default: the study's).")
]
ThresholdOpt = Annotated[
    float,
    typer.Option(
        "--threshold",
        help="Level for episodes-to-threshold, as a fraction of the expert (default 0.8).",
    ),
]

# (parameter, its option, its default), in the order --help lists them
SHARED: tuple[tuple[str, Any, Any], ...] = (
    ("metric", MetricOpt, None),
    ("select", SelectOpt, "final"),
    ("estimator", EstimatorOpt, Estimator.mean),
    ("ci", CiOpt, IntervalMethod(DEFAULT_INTERVAL_METHOD)),
    ("confidence", ConfidenceOpt, 0.95),
    ("resamples", ResamplesOpt, 10_000),
    ("seed", SeedOpt, 0),
    ("include_running", IncludeRunningOpt, False),
)
_LAST = ("fmt", "pager", "ledger", "study")  # a command's own options listed after the shared ones


@dataclass(frozen=True)
class StatsOptions:
    """The shared options as one value (what a command decorated by :func:`statistics_options`
    receives as ``stats``)."""

    select: str = "final"
    estimator: str = "mean"
    ci: str = DEFAULT_INTERVAL_METHOD
    confidence: float = 0.95
    resamples: int = 10_000
    seed: int = 0
    include_running: bool = False
    metric: str | None = None

    def scoring(self) -> dict[str, Any]:
        """The library's keywords for how runs are scored and which count: ``select``,
        ``include_running``, and ``metric`` when one was asked for."""
        chosen = {"metric": self.metric} if self.metric is not None else {}
        return {**chosen, "select": self.select, "include_running": self.include_running}

    def settings(self) -> CurveSettings:
        """The checked :class:`~fewshot.stats.CurveSettings` of these options."""
        from fewshot.stats import CurveSettings

        return CurveSettings(
            str(self.estimator), str(self.ci), self.confidence, self.resamples, self.seed
        ).check()


def statistics_options(
    *, metric: bool = True
) -> Callable[[Callable[..., Any]], Callable[..., Any]]:
    """Add the shared options to a command (``metric=False``: all but ``--metric``).

    The command declares its own options and one keyword ``stats: StatsOptions``; typer sees the
    command's options with the shared ones in place of ``stats``.
    """
    shared = [s for s in SHARED if metric or s[0] != "metric"]

    def decorate(command: Callable[..., Any]) -> Callable[..., Any]:
        hints = typing.get_type_hints(command, include_extras=True)
        own = [
            p.replace(annotation=hints[p.name])
            for p in inspect.signature(command).parameters.values()
            if p.name != "stats"
        ]
        added = [
            inspect.Parameter(name, inspect.Parameter.KEYWORD_ONLY, default=d, annotation=a)
            for name, a, d in shared
        ]
        cut = next((k for k, p in enumerate(own) if p.name in _LAST), len(own))
        params = [*own[:cut], *added, *own[cut:]]

        @functools.wraps(command)
        def run(**kwargs: Any) -> Any:
            picked = {name: kwargs.pop(name) for name, _, _ in shared}
            return command(**kwargs, stats=StatsOptions(**picked))

        del run.__wrapped__  # typer reads the signature below, not the command's own
        run.__signature__ = inspect.Signature(params)  # type: ignore[attr-defined]
        run.__annotations__ = {p.name: p.annotation for p in params}
        return run

    return decorate
