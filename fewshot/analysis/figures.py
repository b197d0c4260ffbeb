"""Figures drawn from report objects: each kind from the report that already holds its numbers."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import pandas as pd

from fewshot.analysis.curves import CurveReport, curve_report
from fewshot.analysis.data import StudyData, as_study_data
from fewshot.analysis.transfer import CompareReport, compare_report
from fewshot.errors import InvalidInput
from fewshot.plots.layout import PAGE_PANELS
from fewshot.stats import CurveSettings

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

    from fewshot.ledger import Ledger

__all__ = [
    "FIGURE_KINDS",
    "CURVE_KINDS",
    "curve_figure",
    "compare_figure",
    "figure_pages",
    "make_figures",
    "make_figure",
]

FIGURE_KINDS = ("curves", "aggregate", "difference", "summary", "profile", "scaling")
CURVE_KINDS = ("curves", "aggregate")  # drawn from a CurveReport; the others from a CompareReport


def _check_kind(kind: str) -> None:
    if kind not in FIGURE_KINDS:
        raise InvalidInput(f"`kind` must be one of {', '.join(FIGURE_KINDS)}. Got {kind!r}.")


def curve_figure(
    rep: CurveReport,
    data: StudyData,
    *,
    fig: Figure | None = None,
    tasks: list[str] | None = None,
    heading: str = "",
) -> Figure:
    """The curves figure of a per-task report, or the aggregate figure of an across-task one
    (one panel per task or group, drawn into ``fig`` when given). ``tasks`` and ``heading``: one
    page of a per-task figure (see :func:`figure_pages`)."""
    from fewshot import plots

    if rep.kind == "per-task":
        return plots.curves_figure(
            rep.table,
            arms=data.arm_order,
            roles=data.roles,
            metric=rep.scores.metric,
            normalised=rep.value == "normalised",
            refs=data.tasks,
            interval=f"{rep.settings.confidence:.0%} {rep.table['method'].iloc[0]}",
            tasks=tasks,
            heading=heading,
            fig=fig,
        )
    return plots.aggregate_figure(
        rep.table, arms=data.arm_order, roles=data.roles, metric=rep.scores.metric, fig=fig
    )


def compare_figure(
    kind: str,
    cmp: CompareReport,
    data: StudyData,
    *,
    size: int | None = None,
    ax: Axes | None = None,
    fig: Figure | None = None,
    tasks: list[str] | None = None,
    heading: str = "",
) -> Figure:
    """A ``difference``, ``summary``, ``profile`` or ``scaling`` figure of a comparison: the
    difference figure (one panel per task; ``tasks`` and ``heading`` for one page) into ``fig``,
    the others onto ``ax``, when given."""
    from fewshot import plots

    _check_kind(kind)
    arms = data.arm_order
    if kind == "difference":
        unit = {
            "normalised": "normalised " + cmp.scores.metric,
            "score": cmp.scores.metric,
            "mixed": cmp.scores.metric + " (normalised where floor/expert exist)",
        }[cmp.value]
        return plots.difference_figure(
            cmp.table,
            arms=arms,
            baseline=cmp.baseline,
            unit=unit,
            tasks=tasks,
            heading=heading,
            fig=fig,
        )
    if kind == "summary":
        if len(cmp.areas):
            areas = cmp.areas
            if areas["sizes"].nunique() > 1:  # different ranges: each area labelled with its own
                areas = areas.assign(task=areas["task"] + " (" + areas["sizes"] + ")")
            return plots.summary_figure(
                areas, value="auc", label="area under the normalised curve (log size)", ax=ax
            )
        eff = cmp.table[cmp.table["task"] != "all"]
        largest = eff.groupby(["arm", "task"])["size"].transform("max")
        eff = eff[eff["size"] == largest]
        return plots.summary_figure(
            eff,
            value="multiplier",
            label="data multiplier at the largest size",
            censored=eff["mark"] == ">=",  # only where the interval lies beyond the ladder too
            ax=ax,
        )
    if kind == "profile":
        from fewshot.stats.profiles import performance_profile

        normed = cmp.scores.scores[cmp.scores.scores["reference"] == "floor/expert"]
        if normed.empty:
            raise InvalidInput(
                "a performance profile needs normalised scores: give the tasks floor and expert."
            )
        present = normed.dropna(subset=["normalised"])
        at = size if size is not None else int(present["size"].max())
        prof = performance_profile(_at_size(present, at), cmp.settings)
        return plots.profile_figure(prof, arms=arms, roles=data.roles, size=at, ax=ax)
    if kind == "scaling":
        return plots.scaling_figure(cmp.scaling, arms=arms, ax=ax)
    raise InvalidInput(
        f"kind {kind!r} is drawn from a curve report (curve_figure), not a comparison."
    )


def figure_pages(
    kind: str,
    report: CurveReport | CompareReport,
    data: StudyData,
    *,
    per_page: int = PAGE_PANELS,
) -> list[tuple[str, Figure]]:
    """A per-task figure (``curves`` of a per-task curve report, ``difference`` of a comparison)
    in pages of at most ``per_page`` panels, paged by task group when there are more tasks than
    one page holds: ``(label, figure)`` per page, the label empty for a single page. The
    difference figure's mean over tasks gets a page of its own then."""
    from fewshot.plots.layout import panel_pages

    if kind not in ("curves", "difference"):
        raise InvalidInput(f"`kind` must be curves or difference for pages. Got {kind!r}.")
    table = report.table
    if kind == "difference":
        table = table.dropna(subset=["difference"])
    tasks = list(dict.fromkeys(table["task"])) if len(table) else []
    groups = {
        str(t): g if isinstance(g, str) else None
        for t, g in zip(data.tasks["task"], data.tasks["group"], strict=True)
    }
    pages = panel_pages(tasks, groups, per_page=per_page)
    if len(pages) > 1 and "all" in tasks:  # the mean over tasks first, on a page of its own
        rest = [t for t in tasks if t != "all"]
        pages = [("mean over tasks", ["all"]), *panel_pages(rest, groups, per_page=per_page)]

    def draw(label: str, page: list[str]) -> Figure:
        if kind == "curves":
            assert isinstance(report, CurveReport)
            return curve_figure(report, data, tasks=page, heading=label)
        assert isinstance(report, CompareReport)
        return compare_figure("difference", report, data, tasks=page, heading=label)

    if not tasks:  # nothing to draw: the figure function says why
        return [("", draw("", []))]
    return [(label, draw(label, page)) for label, page in pages]


def _at_size(normed: pd.DataFrame, size: int) -> pd.DataFrame:
    """The scores a profile at ``size`` reads: only that size's rows when every task has the same
    seeds there as at all sizes (the resample index of a task depends on its seeds alone, so the
    profile at ``size`` is the same, number for number, as the one computed at every size);
    otherwise every row."""
    here = normed[normed["size"] == size]

    def pairs(frame: pd.DataFrame) -> set[tuple[str, int]]:
        return set(zip(frame["task"], frame["seed"], strict=True))

    return here if pairs(here) == pairs(normed) else normed


def make_figure(
    source: Ledger | StudyData,
    kind: str,
    settings: CurveSettings,
    *,
    metric: str | None = None,
    select: str = "final",
    normalised: bool = False,
    baseline: str | None = None,
    size: int | None = None,
    by_group: bool = False,
    ax: Axes | None = None,
    fig: Figure | None = None,
) -> Any:
    """One figure of the study (a matplotlib Figure), from the same statistics the tables print.

    ``source`` is a ledger (read once) or a study already read; only the report the figure needs
    is computed. Panel figures (curves, aggregate, difference) draw into ``fig``, one-panel
    figures onto ``ax``, when given. Every task is on the one figure; :func:`make_figures` pages
    a per-task figure of many tasks.
    """
    data, rep = _figure_report(
        source, kind, settings, metric, select, normalised, baseline, by_group
    )
    if isinstance(rep, CurveReport):
        return curve_figure(rep, data, fig=fig)
    return compare_figure(kind, rep, data, size=size, ax=ax, fig=fig)


def make_figures(
    source: Ledger | StudyData,
    kind: str,
    settings: CurveSettings,
    *,
    metric: str | None = None,
    select: str = "final",
    normalised: bool = False,
    baseline: str | None = None,
    size: int | None = None,
    by_group: bool = False,
    per_page: int = PAGE_PANELS,
) -> list[tuple[str, Figure]]:
    """The figure of :func:`make_figure` as pages ``(label, figure)``: a per-task figure
    (``curves`` of per-task curves, ``difference``) in pages of at most ``per_page`` panels by
    task group (:func:`figure_pages`), any other figure as one page with an empty label."""
    data, rep = _figure_report(
        source, kind, settings, metric, select, normalised, baseline, by_group
    )
    if isinstance(rep, CurveReport):
        if rep.kind == "per-task":
            return figure_pages("curves", rep, data, per_page=per_page)
        return [("", curve_figure(rep, data))]
    if kind == "difference":
        return figure_pages("difference", rep, data, per_page=per_page)
    return [("", compare_figure(kind, rep, data, size=size))]


def _figure_report(  # type: ignore[no-untyped-def]
    source, kind, settings, metric, select, normalised, baseline, by_group
) -> tuple[StudyData, CurveReport | CompareReport]:
    """The study and the one report a figure of ``kind`` is drawn from."""
    _check_kind(kind)
    data = as_study_data(source)
    if kind in CURVE_KINDS:
        rep = curve_report(
            data,
            settings,
            metric=metric,
            select=select,
            normalised=normalised,
            across_tasks=kind == "aggregate" and not by_group,
            by_group=kind == "aggregate" and by_group,
        )
        return data, rep
    return data, compare_report(data, settings, baseline=baseline, metric=metric, select=select)
