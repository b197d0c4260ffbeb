"""A study's arms against its baseline: paired differences, P(improvement), effective data,
episodes to a threshold, areas, the headline fractions and the scaling view, computed once.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from fewshot.analysis.curves import in_study_order
from fewshot.analysis.data import StudyData, StudyScores, as_study_data, study_scores
from fewshot.analysis.qualify import qualify_compare
from fewshot.errors import InvalidInput
from fewshot.stats import CurveSettings, aggregate_curves, to_metric_units
from fewshot.stats.curves import FEW_SEEDS

if TYPE_CHECKING:
    from fewshot.ledger import Ledger

__all__ = ["CompareReport", "compare_report", "compare_scores"]

# the columns of fewshot.stats.transfer.effective_data besides the keys and n_seeds (kept, empty,
# when no task has a baseline curve to read yet)
EFFECT_COLUMNS = [
    "arm_estimate",
    *(
        f"{m}{end}"
        for m in ("effective", "transferred", "multiplier")
        for end in ("", "_low", "_high")
    ),
    "censor",
    "mark",
    "label",
    "hurts",
]


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
    source: Ledger | StudyData,
    settings: CurveSettings,
    *,
    baseline: str | None = None,
    arms: list[str] | None = None,
    threshold: float = 0.8,
    metric: str | None = None,
    select: str = "final",
) -> CompareReport:
    """Arms against the baseline (the study's by default): the transfer table and friends.

    ``source`` is a ledger (read once) or a study already read by :func:`read_study`.
    """
    settings.check()
    data = as_study_data(source)
    sc = study_scores(data, metric=metric, select=select)
    base = baseline or data.study["baseline"]
    report = compare_scores(
        sc, settings, baseline=base, arms=arms, threshold=threshold, arm_table=data.arms
    )
    return qualify_compare(report, data)  # clipped to the study's bounds, unfinished runs marked


def compare_scores(
    sc: StudyScores,
    settings: CurveSettings,
    *,
    baseline: str,
    arms: list[str] | None = None,
    threshold: float = 0.8,
    arm_table: pd.DataFrame | None = None,
    iqm: pd.DataFrame | None = None,
) -> CompareReport:
    """:func:`compare_report` on scores already read (no ledger): what the tests hold to the mirror
    property. Each task is compared in normalised units when it has floor and expert, else in raw
    units; means over tasks use only tasks with floor and expert.

    ``iqm``: the across-task aggregates of these scores with these settings, when the caller has
    them already (every task with floor and expert); the scaling view then reads its IQM rows
    instead of computing them again."""
    from fewshot.stats.profiles import performance_profile, scaling_view
    from fewshot.stats.transfer import (
        check_baseline,
        curve_areas,
        effective_data,
        paired_differences,
        probability_of_improvement_table,
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
    poi = probability_of_improvement_table(
        sc.scores, base, settings, value="value", arms=chosen, over=refs
    )
    eff = effective_data(sc.scores, base, settings, value="value", arms=chosen)
    keys = ["arm", "task", "size"]
    table = diff.merge(
        poi.rename(columns={"low": "p_low", "high": "p_high", "n_seeds": "p_seeds"}),
        on=keys,
        how="left",
    )
    if len(eff):
        table = table.merge(eff.drop(columns=["n_seeds"]), on=keys, how="left")
    else:  # mid-study the baseline may have no curve to read yet: the columns, empty
        table = table.reindex(columns=[*table.columns, *EFFECT_COLUMNS])
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
                f"`threshold` {threshold} lies outside the data: normalised scores run from {lo:.3g} to {hi:.3g} "
                "(1 = the expert). Pick a threshold in that range, e.g. 0.5 or 1.0."
            )
        thresholds = threshold_sizes(normed, threshold, settings)
        areas = curve_areas(normed, settings)
        headline = performance_profile(normed, settings, taus=np.array([threshold]), over="tasks")
        notes.extend(dict.fromkeys(n for n in headline["note"] if n))  # why no interval there
        if arm_table is not None and _has_scaling_attribute(arm_table):
            # the scaling view reads the IQM only: the other aggregates are not computed (or
            # not again, when the caller computed them over the same scores)
            if iqm is None:
                iqm = aggregate_curves(normed, settings, aggregates=("iqm",))
            scaling = scaling_view(iqm, arm_table, statistic="iqm")
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
    held: dict[tuple[str, str], set[int]] = {}  # (arm, task) -> sizes, from one pass
    for arm, task, size in set(
        zip(sc.scores["arm"], sc.scores["task"], sc.scores["size"], strict=True)
    ):
        held.setdefault((arm, task), set()).add(size)
    for task in tasks:
        b_sizes = held.get((base, task), set())
        for arm in chosen:
            missing = sorted(s for s in held.get((arm, task), set()) - b_sizes if s > 0)
            if missing:
                notes.append(
                    f"baseline {base!r} has no scored runs at size(s) {', '.join(map(str, missing))} "
                    f"on task {task!r} (none done there yet, or none planned): no comparison "
                    f"with {arm!r} there"
                )
    if not chosen:
        notes.append(
            f"nothing to compare yet: {base!r} is the only arm with scores; the tables show the "
            "baseline alone (add another arm's results to compare it)"
        )
    n_min = int(table["n_seeds"].min()) if len(table) else 0
    if len(table):
        notes.append(f"pairs by seed (same subsets); seeds behind each comparison: {n_min} or more")
    if len(table) and n_min < FEW_SEEDS:
        notes.append(
            f"some comparisons rest on fewer than {FEW_SEEDS} seeds (flagged !): do not read them as evidence"
        )
    if len(table) and (table["p_seeds"].fillna(0) < 2).any():
        notes.append(
            "too few seeds for an interval on P(improvement), effective data or differences where a "
            "comparison has 1 seed: at least 2 needed (estimates shown without intervals)"
        )
    notes.append(
        "intervals: P(improvement) by Newcombe's score method per task, MOVER over tasks; "
        "effective data and episodes to the "
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
    # every table in the study file's order of arms (as curves and figures are), then as computed
    order = (
        list(arm_table["arm"])
        if arm_table is not None and "arm" in arm_table
        else list(dict.fromkeys(sc.scores["arm"]))
    )
    table, thresholds, areas, headline, scaling = (
        in_study_order(t, order) if "arm" in t else t
        for t in (table, thresholds, areas, headline, scaling)
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


def _has_scaling_attribute(arm_table: pd.DataFrame) -> bool:
    """Whether the arms share a numeric attribute for the scaling view (asked of
    :func:`~fewshot.stats.profiles.scaling_view` itself on no rows, so the rule is held once),
    checked before any aggregate is computed for it."""
    from fewshot.stats.profiles import scaling_view

    empty = pd.DataFrame(
        columns=["arm", "role", "group", "aggregate", "size", "estimate", "low", "high"]
    )
    try:
        scaling_view(empty, arm_table, statistic="iqm")
    except InvalidInput:
        return False
    return True


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
