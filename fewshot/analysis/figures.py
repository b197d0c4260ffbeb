"""Figures drawn from report objects: each kind from the report that already holds its numbers."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from fewshot.analysis.curves import CurveReport, curve_report
from fewshot.analysis.data import StudyData, as_study_data
from fewshot.analysis.transfer import CompareReport, compare_report
from fewshot.errors import InvalidInput
from fewshot.stats import CurveSettings

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

    from fewshot.ledger import Ledger

__all__ = ["FIGURE_KINDS", "CURVE_KINDS", "curve_figure", "compare_figure", "make_figure"]

FIGURE_KINDS = ("curves", "aggregate", "difference", "summary", "profile", "scaling")
CURVE_KINDS = ("curves", "aggregate")  # drawn from a CurveReport; the others from a CompareReport


def _check_kind(kind: str) -> None:
    if kind not in FIGURE_KINDS:
        raise InvalidInput(f"kind must be one of {', '.join(FIGURE_KINDS)}. Got {kind!r}.")


def curve_figure(rep: CurveReport, data: StudyData, *, fig: Figure | None = None) -> Figure:
    """The curves figure of a per-task report, or the aggregate figure of an across-task one
    (one panel per task or group, drawn into ``fig`` when given)."""
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
) -> Figure:
    """A ``difference``, ``summary``, ``profile`` or ``scaling`` figure of a comparison: the
    difference figure (one panel per task) into ``fig``, the others onto ``ax``, when given."""
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
            cmp.table, arms=arms, baseline=cmp.baseline, unit=unit, fig=fig
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
        prof = performance_profile(normed, cmp.settings)
        at = size if size is not None else int(max(s for s in prof["size"]))
        return plots.profile_figure(prof, arms=arms, roles=data.roles, size=at, ax=ax)
    if kind == "scaling":
        return plots.scaling_figure(cmp.scaling, arms=arms, ax=ax)
    raise InvalidInput(
        f"kind {kind!r} is drawn from a curve report (curve_figure), not a comparison."
    )


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
    figures onto ``ax``, when given.
    """
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
        return curve_figure(rep, data, fig=fig)
    cmp = compare_report(data, settings, baseline=baseline, metric=metric, select=select)
    return compare_figure(kind, cmp, data, size=size, ax=ax, fig=fig)
