"""Figures over the size axis: curves per task, aggregates over tasks, differences from the baseline."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import pandas as pd

from fewshot.errors import InvalidInput
from fewshot.plots.layout import (
    COLUMN_WIDTH,
    _draw_arm,
    _fit_grid,
    _grid,
    _legend,
    _seeds_text,
    _size_axis,
    _suptitle,
    arm_colours,
    styled,
)

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = ["curves_figure", "aggregate_figure", "difference_figure"]


@styled
def curves_figure(
    curves: pd.DataFrame,
    *,
    arms: Sequence[str],
    roles: dict[str, str],
    metric: str,
    normalised: bool,
    refs: pd.DataFrame | None = None,
    interval: str = "",
    tasks: Sequence[str] | None = None,
    heading: str = "",
    fig: Figure | None = None,
) -> Figure:
    """One panel per task: each arm's curve with its interval; floor and expert as reference lines.
    Drawn into ``fig`` when given (it should be empty). ``tasks``: the panels of one page (see
    :func:`~fewshot.plots.layout.panel_pages`), in order; ``heading`` opens the title (the page)."""
    curves, tasks = _page(curves, tasks)
    if curves.empty:
        raise InvalidInput("there are no curve points to plot yet: record some results first.")
    styles = arm_colours(arms)
    fig, axes = _grid(len(tasks), fig=fig)
    ylabel = f"{metric} (normalised)" if normalised else metric
    parts = dict(tuple(curves.groupby("task", sort=False)))
    for ax, task in zip(axes, tasks, strict=False):
        part = parts.get(task, curves.iloc[:0])
        zero_at = _size_axis(ax, sorted(set(part["size"])))
        by_arm = dict(tuple(part.groupby("arm", sort=False)))
        for arm in arms:
            rows = by_arm.get(arm)
            if rows is not None:
                _draw_arm(ax, rows, arm, styles[arm], roles.get(arm) == "baseline", zero_at)
        if refs is not None and task in set(refs["task"]):
            r = refs[refs["task"] == task].iloc[0]
            for name, level in (("floor", r["floor"]), ("expert", r["expert"])):
                if not pd.isna(level):
                    y = (0.0 if name == "floor" else 1.0) if normalised else level
                    ax.axhline(y, color="grey", lw=0.7, ls=":")
                    ax.annotate(
                        name,
                        (0.98, y),
                        xycoords=("axes fraction", "data"),
                        ha="right",
                        va="bottom",
                        fontsize=6,
                        color="grey",
                    )
        ax.set_title(task)
        ax.set_xlabel("episodes (log scale)")
        ax.set_ylabel(ylabel)
    top = _legend(fig, axes[0])
    _suptitle(
        fig,
        _heading(heading)
        + f"{ylabel} against episodes; {interval} intervals over {_seeds_text(curves)}",
    )
    _fit_grid(fig, axes, len(tasks), top)
    return fig


@styled
def aggregate_figure(
    aggregate: pd.DataFrame,
    *,
    arms: Sequence[str],
    roles: dict[str, str],
    metric: str,
    statistic: str = "iqm",
    fig: Figure | None = None,
) -> Figure:
    """The across-task (or per-group) aggregate curve of each arm; one panel per group, drawn
    into ``fig`` when given."""
    data = aggregate[aggregate["aggregate"] == statistic]
    if data.empty:
        raise InvalidInput(
            f"no {statistic} aggregate to plot: it needs normalised scores (floor and expert)."
        )
    groups = list(dict.fromkeys(data["group"].where(data["group"].notna(), "all tasks")))
    styles = arm_colours(arms)
    fig, axes = _grid(
        len(groups), width=COLUMN_WIDTH if len(groups) == 1 else COLUMN_WIDTH * 2, fig=fig
    )
    for ax, g in zip(axes, groups, strict=False):
        part = data[data["group"].where(data["group"].notna(), "all tasks") == g]
        zero_at = _size_axis(ax, sorted(set(part["size"])))
        for arm in arms:
            rows = part[part["arm"] == arm]
            if len(rows):
                _draw_arm(ax, rows, arm, styles[arm], roles.get(arm) == "baseline", zero_at)
        ax.axhline(1.0, color="grey", lw=0.7, ls=":")
        ax.set_title(str(g))
        ax.set_xlabel("episodes (log scale)")
        ax.set_ylabel(
            f"{statistic.upper() if statistic == 'iqm' else statistic} of {metric} (normalised)"
        )
    top = _legend(fig, axes[0])
    _suptitle(fig, f"stratified bootstrap intervals over {_seeds_text(data)} per task")
    _fit_grid(fig, axes, len(groups), top)
    return fig


@styled
def difference_figure(
    table: pd.DataFrame,
    *,
    arms: Sequence[str],
    baseline: str,
    unit: str,
    tasks: Sequence[str] | None = None,
    heading: str = "",
    fig: Figure | None = None,
) -> Figure:
    """Arm minus baseline per size with its interval and a zero line; one panel per task, drawn
    into ``fig`` when given. ``tasks`` and ``heading``: one page, as in :func:`curves_figure`."""
    data, tasks = _page(table.dropna(subset=["difference"]), tasks)
    if data.empty:
        raise InvalidInput(f"no paired differences with {baseline!r} to plot.")
    styles = arm_colours(arms)
    fig, axes = _grid(len(tasks), fig=fig)
    parts = dict(tuple(data.groupby("task", sort=False)))
    for ax, task in zip(axes, tasks, strict=False):
        part = parts.get(task, data.iloc[:0])
        zero_at = _size_axis(ax, sorted(set(part["size"])))
        ax.axhline(0, color="black", lw=0.7)
        by_arm = dict(tuple(part.groupby("arm", sort=False)))
        for arm in arms:
            rows = by_arm.get(arm)
            if rows is not None:
                _draw_arm(ax, rows, arm, styles[arm], False, zero_at, value="difference")
        ax.set_title("mean over tasks" if task == "all" else task)
        ax.set_xlabel("episodes (log scale)")
        ax.set_ylabel(f"{unit} minus {baseline}")
    top = _legend(fig, axes[0])
    _suptitle(fig, _heading(heading) + f"paired by seed; intervals over {_seeds_text(data)}")
    _fit_grid(fig, axes, len(tasks), top)
    return fig


def _page(frame: pd.DataFrame, tasks: Sequence[str] | None) -> tuple[pd.DataFrame, list[str]]:
    """The rows of the page's tasks and the page's tasks (every task, in order, by default)."""
    if tasks is None:
        return frame, list(dict.fromkeys(frame["task"]))
    return frame[frame["task"].isin(list(tasks))], list(tasks)


def _heading(heading: str) -> str:
    return f"{heading}: " if heading else ""
