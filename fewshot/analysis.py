"""From a ledger to statistics tables: the glue the curves, compare and report commands share.

The statistics layer (``fewshot.stats``) never touches the ledger; this module reads the
ledger's tidy tables and hands DataFrames to it, recording every setting used.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from fewshot.errors import InvalidInput
from fewshot.ledger import Ledger
from fewshot.stats import (
    CurveSettings,
    aggregate_curves,
    curves,
    orient,
    parse_rule,
    run_scores,
    to_metric_units,
)

__all__ = [
    "StudyScores",
    "CurveReport",
    "CompareReport",
    "load_scores",
    "score_tables",
    "curve_report",
    "curve_scores",
    "caveats",
    "compare_report",
    "compare_scores",
    "seeds_report",
]


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
    return score_tables(
        results,
        ledger.tasks(),
        metric=metric,
        higher_is_better=bool(study["higher_is_better"]),
        select=str(rule),
    )


def score_tables(
    results: pd.DataFrame,
    tasks: pd.DataFrame,
    *,
    metric: str,
    higher_is_better: bool,
    select: str = "final",
) -> StudyScores:
    """Run scores from a results table (:meth:`Ledger.results` columns) and a tasks table (task,
    floor, expert): :func:`load_scores` without the ledger."""
    rule = parse_rule(select)
    scores = run_scores(results, metric, rule)
    # the metric's direction is applied here, once: everything downstream reads higher-is-better
    normed = orient(scores, tasks, higher_is_better=higher_is_better)
    raw = tuple(sorted(set(tasks.loc[tasks["floor"].isna() | tasks["expert"].isna(), "task"])))
    return StudyScores(normed, metric, str(rule), higher_is_better, raw)


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
    return curve_scores(
        sc,
        settings,
        normalised=normalised,
        across_tasks=across_tasks,
        by_group=by_group,
        arms=list(ledger.arms()["arm"]),
    )


def curve_scores(
    sc: StudyScores,
    settings: CurveSettings,
    *,
    normalised: bool = False,
    across_tasks: bool = False,
    by_group: bool = False,
    arms: list[str] | None = None,
) -> CurveReport:
    """:func:`curve_report` on scores already read (no ledger); ``arms`` gives the rows' order."""
    if across_tasks and by_group:
        raise InvalidInput("choose one of --across-tasks and --by-group.")
    aggregate = across_tasks or by_group
    value = "normalised" if (normalised or aggregate) else "score"
    if value == "normalised" and not (sc.scores["reference"] == "floor/expert").any():
        raise InvalidInput(
            "no task has both floor and expert, so there are no normalised scores. "
            "Add floor and expert to the tasks in the study file, or drop --normalised."
        )
    if aggregate:
        table = aggregate_curves(sc.scores, settings, value="normalised", by_group=by_group)
        kind = "by-group" if by_group else "across-tasks"
    else:
        # raw curves are computed higher-is-better (oriented) and shown in the metric's units
        table = curves(sc.scores, settings, value="normalised" if normalised else "oriented")
        if value == "score":
            table = to_metric_units(table, higher_is_better=sc.higher_is_better)
        kind = "per-task"
    table = _in_study_order(table, arms or list(dict.fromkeys(sc.scores["arm"])))
    report = CurveReport(table, kind, value, settings, sc)
    report.notes.extend(caveats(report))
    return report


def _in_study_order(table: pd.DataFrame, arms: list[str]) -> pd.DataFrame:
    """Rows in the study file's order of arms (then as they were), as every figure draws them."""
    if table.empty:
        return table
    rank = {a: i for i, a in enumerate(arms)}
    order = table["arm"].map(lambda a: rank.get(a, len(rank)))
    return (
        table.assign(_o=order)
        .sort_values("_o", kind="stable")
        .drop(columns="_o")
        .reset_index(drop=True)
    )


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


@dataclass(frozen=True)
class CompareReport:
    """Every transfer measure of a study against one baseline.

    Attributes
    ----------
    table : DataFrame
        One row per (arm, task, size): difference, P(improvement) and effective data, with lows,
        highs and censoring (task ``"all"``: means over tasks).
    thresholds, areas : DataFrame
        Episodes to reach the threshold; areas under the normalised curves.
    headline : DataFrame
        Fraction of tasks whose estimate exceeds the threshold, per arm and size (with intervals).
    scaling : DataFrame
        Across-task IQM per arm and size beside the arms' first shared numeric attribute (empty
        when no attribute is shared).
    baseline : str
    value : str
        ``normalised`` (every task has floor and expert), ``score`` (none has) or ``mixed``; the
        table's ``unit`` column says which per row. Raw rows are in the metric's own units.
    threshold : float
    settings : CurveSettings
    scores : StudyScores
    notes : list of str
    over_tasks : tuple of str
        The tasks behind the ``"all"`` rows (tasks with floor and expert); empty without them.
    """

    table: pd.DataFrame
    thresholds: pd.DataFrame
    areas: pd.DataFrame
    headline: pd.DataFrame
    scaling: pd.DataFrame
    baseline: str
    value: str
    threshold: float
    settings: CurveSettings
    scores: StudyScores
    notes: list[str] = field(default_factory=list)
    over_tasks: tuple[str, ...] = ()


def compare_report(
    ledger: Ledger,
    settings: CurveSettings,
    *,
    baseline: str | None = None,
    arms: list[str] | None = None,
    threshold: float = 1.0,
    metric: str | None = None,
    select: str = "final",
) -> CompareReport:
    """Arms against the baseline (the study's by default): the transfer table and friends."""
    settings.check()
    sc = load_scores(ledger, metric=metric, select=select)
    base = baseline or ledger.study_row()["baseline"]
    return compare_scores(
        sc, settings, baseline=base, arms=arms, threshold=threshold, arm_table=ledger.arms()
    )


def compare_scores(
    sc: StudyScores,
    settings: CurveSettings,
    *,
    baseline: str,
    arms: list[str] | None = None,
    threshold: float = 1.0,
    arm_table: pd.DataFrame | None = None,
) -> CompareReport:
    """:func:`compare_report` on scores already read (no ledger): what the tests hold to the mirror
    property. Each task is compared in normalised units when it has floor and expert, else in raw
    units; means over tasks use only tasks with floor and expert."""
    from fewshot.stats.profiles import performance_profile, scaling_view
    from fewshot.stats.transfer import (
        check_baseline,
        curve_areas,
        effective_data,
        improvement_probability,
        paired_differences,
        thin_baselines,
        threshold_sizes,
    )

    settings.check()
    base = baseline
    chosen = check_baseline(sc.scores, base, arms)
    tasks = sorted(sc.scores["task"].unique())
    refs = sorted(set(sc.scores.loc[sc.scores["reference"] == "floor/expert", "task"]))
    raw = [t for t in tasks if t not in refs]
    value = "normalised" if not raw else ("score" if not refs else "mixed")
    notes = _unit_notes(sc, tasks, refs, raw)
    diff = paired_differences(sc.scores, base, settings, value="value", arms=chosen, over=refs)
    poi = improvement_probability(sc.scores, base, settings, value="value", arms=chosen, over=refs)
    eff = effective_data(sc.scores, base, settings, value="value", arms=chosen)
    keys = ["arm", "task", "size"]
    table = diff.merge(
        poi.rename(columns={"low": "p_low", "high": "p_high", "n_seeds": "p_seeds"}),
        on=keys,
        how="left",
    )
    table = table.merge(eff.drop(columns=["n_seeds"]), on=keys, how="left")
    in_raw = table["task"].isin(raw)
    table.insert(3, "unit", np.where(in_raw, sc.metric, "normalised"))
    # raw values back into the metric's own units (a lower-is-better metric's differences turn sign)
    table = to_metric_units(
        table,
        higher_is_better=sc.higher_is_better,
        columns=("difference", "low", "high"),
        rows=in_raw,
    )
    if not sc.higher_is_better and "arm_estimate" in table:
        table.loc[in_raw, "arm_estimate"] = -table.loc[in_raw, "arm_estimate"]
    normed = sc.scores[sc.scores["reference"] == "floor/expert"]
    thresholds = pd.DataFrame()
    areas = pd.DataFrame()
    headline = pd.DataFrame()
    scaling = pd.DataFrame()
    if len(normed):
        lo, hi = float(normed["normalised"].min()), float(normed["normalised"].max())
        if not lo <= threshold <= max(hi, 1.0):
            raise InvalidInput(
                f"--threshold {threshold} lies outside the data: normalised scores run from {lo:.3g} to {hi:.3g} "
                "(1 = the expert). Pick a threshold in that range, e.g. 0.5 or 1.0."
            )
        thresholds = threshold_sizes(normed, threshold, settings)
        areas = curve_areas(normed, settings)
        headline = performance_profile(normed, settings, taus=np.array([threshold]), over="tasks")
        if arm_table is not None:
            try:
                scaling = scaling_view(aggregate_curves(normed, settings), arm_table)
            except InvalidInput:
                scaling = pd.DataFrame()
    else:
        notes.append(
            "no task has floor and expert: episodes-to-threshold and areas need normalised scores"
        )
    thin = thin_baselines(sc.scores, base, value="value")
    if thin:
        notes.append(
            f"baseline {base!r} has results at fewer than two sizes >= 1 on {', '.join(thin)}: no "
            "effective data or area there (a curve needs two sizes)"
        )
    if len(areas) and areas["sizes"].nunique() > 1:
        notes.append(
            "areas cover different size ranges ("
            + ", ".join(sorted(set(areas["sizes"])))
            + "): compare an area only with areas over the same range (the sizes column)"
        )
    for task in tasks:
        b_sizes = set(sc.scores[(sc.scores["arm"] == base) & (sc.scores["task"] == task)]["size"])
        for arm in chosen:
            a_sizes = set(
                sc.scores[(sc.scores["arm"] == arm) & (sc.scores["task"] == task)]["size"]
            )
            missing = sorted(s for s in a_sizes - b_sizes if s > 0)
            if missing:
                notes.append(
                    f"baseline {base!r} has no runs at size(s) {', '.join(map(str, missing))} on task "
                    f"{task!r}: no comparison with {arm!r} there"
                )
    n_min = int(table["n_seeds"].min()) if len(table) else 0
    notes.append(f"pairs by seed (same subsets); seeds behind each comparison: {n_min} or more")
    if n_min < 3:
        notes.append(
            "some comparisons rest on fewer than 3 seeds (flagged !): do not read them as evidence"
        )
    if len(table) and (table["p_seeds"].fillna(0) < 2).any():
        notes.append(
            "too few seeds for an interval on P(improvement), effective data or differences where a "
            "comparison has 1 seed: at least 2 needed (estimates shown without intervals)"
        )
    notes.append(
        "intervals: P(improvement) by Newcombe's score method; effective data and episodes to the "
        "threshold by inverting a paired t test over sizes; areas by Student's t over seeds "
        "(coverage measured by simulation: see the README)"
    )
    if (table.get("mark", pd.Series(dtype=str)) == ">=").any():
        notes.append(
            "'>=' marks effective data beyond the baseline's largest size (its whole interval lies there)"
        )
    if (table.get("label", pd.Series(dtype=str)) == "no clear difference").any():
        notes.append(
            "'no clear difference': the interval of effective data holds n, so the data cannot tell "
            "whether pretraining helps or hurts there"
        )
    if (thresholds.get("label", pd.Series(dtype=str)) == "not reached").any():
        notes.append(
            f"some arms are clearly below {threshold:g} (normalised) at the largest size: shown as '> largest'"
        )
    return CompareReport(
        table,
        thresholds,
        areas,
        headline,
        scaling,
        base,
        value,
        threshold,
        settings,
        sc,
        notes,
        tuple(refs) if len(refs) > 1 else (),
    )


def _unit_notes(sc: StudyScores, tasks: list[str], refs: list[str], raw: list[str]) -> list[str]:
    """What the units of a comparison are, and which tasks the means over tasks leave out."""
    notes = []
    if raw and refs:
        notes.append(
            f"differences are normalised except on tasks without floor/expert, in raw {sc.metric}: "
            f"{', '.join(raw)}"
        )
        if len(refs) > 1:
            notes.append(
                f"means over tasks ('all') use only the {len(refs)} tasks with floor and expert; "
                f"left out: {', '.join(raw)}"
            )
        else:
            notes.append(
                "no mean over tasks: only one task has floor and expert, and raw units of different "
                "tasks do not average"
            )
    elif raw:
        notes.append(f"no task has floor and expert: differences are in raw {sc.metric}")
        if len(tasks) > 1:
            notes.append("no mean over tasks: raw units of different tasks do not average")
    if raw and not sc.higher_is_better:
        notes.append(
            f"lower {sc.metric} is better: a negative raw difference is an improvement "
            "(P(improvement) and effective data count lower as better)"
        )
    return notes


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


FIGURE_KINDS = ("curves", "aggregate", "difference", "summary", "profile", "scaling")


def make_figure(
    ledger: Ledger,
    kind: str,
    settings: CurveSettings,
    *,
    metric: str | None = None,
    select: str = "final",
    normalised: bool = False,
    baseline: str | None = None,
    size: int | None = None,
    by_group: bool = False,
):  # type: ignore[no-untyped-def]
    """One figure of the study (a matplotlib Figure), from the same statistics the tables print."""
    from fewshot import plots

    if kind not in FIGURE_KINDS:
        raise InvalidInput(f"--kind must be one of {', '.join(FIGURE_KINDS)}. Got {kind!r}.")
    arm_table = ledger.arms()
    arms = list(arm_table["arm"])
    roles = dict(zip(arm_table["arm"], arm_table["role"], strict=True))
    if kind in ("curves", "aggregate"):
        rep = curve_report(
            ledger,
            settings,
            metric=metric,
            select=select,
            normalised=normalised,
            across_tasks=kind == "aggregate" and not by_group,
            by_group=kind == "aggregate" and by_group,
        )
        if kind == "curves":
            return plots.curves_figure(
                rep.table,
                arms=arms,
                roles=roles,
                metric=rep.scores.metric,
                normalised=rep.value == "normalised",
                refs=ledger.tasks(),
                interval=f"{settings.confidence:.0%} {rep.table['method'].iloc[0]}",
            )
        return plots.aggregate_figure(rep.table, arms=arms, roles=roles, metric=rep.scores.metric)
    cmp = compare_report(ledger, settings, baseline=baseline, metric=metric, select=select)
    unit = {
        "normalised": "normalised " + cmp.scores.metric,
        "score": cmp.scores.metric,
        "mixed": cmp.scores.metric + " (normalised where floor/expert exist)",
    }[cmp.value]
    if kind == "difference":
        return plots.difference_figure(cmp.table, arms=arms, baseline=cmp.baseline, unit=unit)
    if kind == "summary":
        if len(cmp.areas):
            areas = cmp.areas
            if areas["sizes"].nunique() > 1:  # different ranges: each area labelled with its own
                areas = areas.assign(task=areas["task"] + " (" + areas["sizes"] + ")")
            return plots.summary_figure(
                areas, value="auc", label="area under the normalised curve (log size)"
            )
        eff = cmp.table[cmp.table["task"] != "all"]
        largest = eff.groupby(["arm", "task"])["size"].transform("max")
        eff = eff[eff["size"] == largest]
        return plots.summary_figure(
            eff,
            value="multiplier",
            label="data multiplier at the largest size",
            censored=eff["mark"] == ">=",  # only where the interval lies beyond the ladder too
        )
    if kind == "profile":
        from fewshot.stats.profiles import performance_profile

        normed = cmp.scores.scores[cmp.scores.scores["reference"] == "floor/expert"]
        if normed.empty:
            raise InvalidInput(
                "a performance profile needs normalised scores: give the tasks floor and expert."
            )
        prof = performance_profile(normed, settings)
        at = size if size is not None else int(max(s for s in prof["size"]))
        return plots.profile_figure(prof, arms=arms, roles=roles, size=at)
    return plots.scaling_figure(cmp.scaling, arms=arms)
