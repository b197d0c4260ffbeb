"""The findings summary: what pretraining is worth, and how sure we are, in a few sentences.

Every sentence is read off report objects already computed (the comparison table, the
episodes-to-threshold table and the across-task aggregate): nothing here computes a statistic.
Each sentence carries its number and interval, the seeds and tasks behind it, and claims no more
than its interval supports: an interval of a difference that holds zero reads "no clear
difference", never "helps" or "hurts".
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import pandas as pd

from fewshot.analysis.finding import Finding, Findings
from fewshot.tables import (
    UNFINISHED_COLUMN,
    UNFINISHED_MARK,
    bound,
    number,
    threshold_cell,
    unfinished,
)

if TYPE_CHECKING:
    from fewshot.analysis.curves import CurveReport
    from fewshot.analysis.study_report import StudyReports
    from fewshot.analysis.transfer import CompareReport

__all__ = [
    "DEFAULT_THRESHOLD",
    "Finding",
    "Findings",
    "findings",
    "study_findings",
    "summarise_study",
]

AGGREGATE = "iqm"  # the across-task aggregate the summary quotes (robust to one odd task)


def _iv(est: float, low: float, high: float, *, signed: bool = False) -> str:
    e = number(est)
    if signed and est > 0:
        e = "+" + e
    if pd.isna(low) or pd.isna(high):
        return f"{e} (no interval)"
    return f"{e} [{number(low)}, {number(high)}]"


def _behind(n_seeds: int, tasks: tuple[str, ...]) -> str:
    t = f"{len(tasks)} task{'s' if len(tasks) != 1 else ''}"
    return f"({n_seeds} seeds, {t})"


def study_findings(rep: StudyReports) -> Findings:
    """The findings of every report of a study (from :func:`analyse_study`)."""
    if rep.compare is None:
        raise ValueError(f"no comparison to summarise: {rep.compare_error}")
    return findings(rep.compare, rep.aggregate, arm_order=rep.data.arm_order)


def findings(
    compare: CompareReport,
    aggregate: CurveReport | None = None,
    *,
    arm_order: list[str] | None = None,
) -> Findings:
    """The findings summary of ``compare`` (and the across-task ``aggregate``, for the zero-shot
    scores and the best arm), arms in ``arm_order``."""
    table = compare.table
    conf = compare.settings.confidence
    arms = [a for a in (arm_order or list(dict.fromkeys(table["arm"]))) if a in set(table["arm"])]
    over = tuple(compare.over_tasks)
    tasks = sorted(set(table["task"]) - {"all"})
    scopes = ["all"] if over else tasks
    unit = "normalised score" if compare.value == "normalised" else f"{compare.scores.metric}"
    pre = [
        f"Each arm against {compare.baseline}, paired by seed. 'Reliably ahead' means the paired "
        f"{conf:.0%} interval of the difference lies above zero; an interval that holds zero is "
        "'no clear difference'. Numbers read 'estimate [low, high]'."
    ]
    if over:
        pre.append(f"'over tasks' = the mean over {len(over)} tasks: {', '.join(over)}.")
    late = [t for t in (table, None if aggregate is None else aggregate.table) if t is not None]
    if any((t.get(UNFINISHED_COLUMN, pd.Series(dtype=int)) > 0).any() for t in late):
        pre.append(
            f"{UNFINISHED_MARK} = the sentence's numbers include results of runs not yet done "
            "(running, claimed, failed or planned); they may change when those runs finish."
        )
    out = Findings(compare.baseline, compare.threshold, conf, [], pre)
    for arm in arms:
        for scope in scopes:
            scope_tasks = over if scope == "all" else (scope,)
            where = "over tasks" if scope == "all" else f"on {scope}"
            out.statements.extend(_zero_shot(arm, scope, where, scope_tasks, aggregate))
            out.statements.extend(_ahead(arm, scope, where, scope_tasks, table, compare, unit))
        out.statements.extend(_multiplier(arm, table, compare))
        out.statements.extend(_threshold(arm, compare))
    if aggregate is not None:
        out.statements.extend(_best(aggregate, arms + [compare.baseline], conf))
    return out


def _zero_shot(arm, scope, where, tasks, aggregate) -> list[Finding]:  # type: ignore[no-untyped-def]
    if aggregate is None or scope != "all":
        return []
    t = aggregate.table
    rows = t[(t["arm"] == arm) & (t["size"] == 0) & (t["aggregate"] == AGGREGATE)]
    if not len(rows):
        return []
    r = rows.iloc[0]
    n = int(r["n_seeds"])
    same = " (the same for every seed)" if math.isclose(r["low"], r["high"], rel_tol=1e-9) else ""
    return [
        Finding(
            arm,
            "zero-shot",
            f"Zero-shot (no episodes), {where}: interquartile mean of the normalised score "
            f"{_iv(r['estimate'], r['low'], r['high'])}{same} {_behind(n, tasks)}.{unfinished(r)}",
            "aggregate.table",
            "all",
            0,
            float(r["estimate"]),
            float(r["low"]),
            float(r["high"]),
            n,
            tuple(tasks),
        )
    ]


def _ahead(arm, scope, where, tasks, table, compare, unit) -> list[Finding]:  # type: ignore[no-untyped-def]
    rows = table[(table["arm"] == arm) & (table["task"] == scope) & (table["size"] > 0)]
    rows = rows.sort_values("size")
    if not len(rows):
        return []
    base = compare.baseline
    ahead = rows[rows["low"] > 0]
    behind = rows[rows["high"] < 0]
    found: list[Finding] = []

    def make(kind: str, r: pd.Series, text: str) -> Finding:
        return Finding(
            arm,
            kind,
            text + unfinished(r),
            "compare.table",
            scope,
            int(r["size"]),
            float(r["difference"]),
            float(r["low"]),
            float(r["high"]),
            int(r["n_seeds"]),
            tuple(tasks),
        )

    if len(ahead):
        first, last = ahead.iloc[0], ahead.iloc[-1]
        sizes = ", ".join(str(int(s)) for s in ahead["size"])
        found.append(
            make(
                "ahead",
                first,
                f"Reliably ahead of {base} {where} at n = {sizes} ({len(ahead)} of {len(rows)} "
                f"sizes). Smallest: n = {int(first['size'])}, difference "
                f"{_iv(first['difference'], first['low'], first['high'], signed=True)} "
                f"{_behind(int(first['n_seeds']), tasks)}.",
            )
        )
        if int(last["size"]) != int(first["size"]):
            found.append(
                make(
                    "ahead",
                    last,
                    f"Largest size still reliably ahead {where}: n = {int(last['size'])}, "
                    f"{_iv(last['difference'], last['low'], last['high'], signed=True)} "
                    f"{_behind(int(last['n_seeds']), tasks)}.",
                )
            )
    else:
        r = rows.iloc[0]
        found.append(
            make(
                "no clear difference",
                r,
                f"No clear difference from {base} {where} at any size ({unit}); at the smallest, "
                f"n = {int(r['size'])}: {_iv(r['difference'], r['low'], r['high'], signed=True)} "
                f"{_behind(int(r['n_seeds']), tasks)}.",
            )
        )
    for _, r in behind.iterrows():
        found.append(
            make(
                "behind",
                r,
                f"Reliably behind {base} {where} at n = {int(r['size'])}: "
                f"{_iv(r['difference'], r['low'], r['high'], signed=True)} "
                f"{_behind(int(r['n_seeds']), tasks)}.",
            )
        )
    return found


def _multiplier(arm: str, table: pd.DataFrame, compare: CompareReport) -> list[Finding]:
    rows = table[(table["arm"] == arm) & (table["task"] != "all") & (table["size"] > 0)]
    rows = rows[rows["multiplier"].notna()]
    if not len(rows):
        return []
    n = int(rows["size"].min())
    at = rows[rows["size"] == n]
    parts = []
    for _, r in at.iterrows():
        cell = f"x{number(r['multiplier'], 2)}"
        lo, hi = r.get("multiplier_low"), r.get("multiplier_high")
        if not pd.isna(lo) and not pd.isna(hi):
            cell += f" [{bound(lo)}, {bound(hi)}]"
        label = r.get("label")
        if isinstance(label, str) and label:
            cell += f", {label}"
        parts.append(f"{r['task']} {cell}")
    n_seeds = int(at["n_seeds"].min())
    tasks = tuple(str(t) for t in at["task"])
    return [
        Finding(
            arm,
            "multiplier",
            f"Data multiplier at n = {n} (baseline episodes to match, / {n}), "
            f"per task: {'; '.join(parts)} {_behind(n_seeds, tasks)}.",
            "compare.table",
            ",".join(tasks),
            n,
            float(at["multiplier"].iloc[0]) if len(at) == 1 else None,
            None,
            None,
            n_seeds,
            tasks,
        )
    ]


def _threshold(arm: str, compare: CompareReport) -> list[Finding]:
    t = compare.thresholds
    if not len(t):
        return []
    mine = t[t["arm"] == arm]
    base = t[t["arm"] == compare.baseline].set_index("task")
    if not len(mine):
        return []
    parts = []
    for _, r in mine.iterrows():
        theirs = threshold_cell(base.loc[r["task"]]) if r["task"] in base.index else "-"
        parts.append(f"{r['task']} {threshold_cell(r)} against {theirs}")
    n_seeds = int(mine["n_seeds"].min())
    tasks = tuple(str(x) for x in mine["task"])
    return [
        Finding(
            arm,
            "threshold",
            f"Episodes to reach {compare.threshold:g} of expert, against {compare.baseline}'s: "
            f"{'; '.join(parts)} {_behind(n_seeds, tasks)}.",
            "compare.thresholds",
            ",".join(tasks),
            None,
            None,
            None,
            None,
            n_seeds,
            tasks,
        )
    ]


def _best(aggregate: CurveReport, arms: list[str], confidence: float) -> list[Finding]:
    t = aggregate.table
    t = t[(t["aggregate"] == AGGREGATE) & (t["size"] > 0) & t["arm"].isin(arms)]
    sizes = sorted(set(t["size"]))
    if not sizes:
        return []
    found = []
    for label, n in (("smallest", sizes[0]), ("largest", sizes[-1])):
        at = t[t["size"] == n].set_index("arm")
        at = at.loc[[a for a in arms if a in at.index]]
        top = str(at["estimate"].idxmax())
        r = at.loc[top]
        others = at.drop(index=top)
        overlap = [a for a, o in others.iterrows() if not o["high"] < r["low"]]
        tasks = tuple(sorted(set(str(x) for x in aggregate.scores.scores["task"])))
        behind = _behind(int(at["n_seeds"].min()), tasks)
        head = (
            f"At the {label} size, n = {n}: highest interquartile mean {top} "
            f"{_iv(r['estimate'], r['low'], r['high'])}"
        )
        if overlap:
            kind = "no clear best"
            text = (
                f"{head}, but its {confidence:.0%} interval overlaps those of "
                f"{', '.join(overlap)}: no clear best {behind}."
            )
        else:
            kind = "best"
            text = f"{head}, its interval above every other arm's {behind}."
        text += unfinished(r)
        found.append(
            Finding(
                "across arms",
                kind,
                text,
                "aggregate.table",
                "all",
                int(n),
                float(r["estimate"]),
                float(r["low"]),
                float(r["high"]),
                int(r["n_seeds"]),
                tasks,
            )
        )
    return found


DEFAULT_THRESHOLD = 0.8  # of the expert (normalised): 1.0 leaves most "episodes to reach" censored


def summarise_study(
    source: Any,
    settings: Any = None,
    *,
    select: str = "final",
    baseline: str | None = None,
    threshold: float = DEFAULT_THRESHOLD,
    include_running: bool = False,
) -> Findings:
    """The findings summary of a study: ``source`` is a ledger or a study read by
    :func:`read_study` with its status; ``settings`` a :class:`CurveSettings` (default ones when
    None); ``include_running``: results of runs not yet done count too (marked). Computes each
    report once (:func:`analyse_study`) and reads the summary off them."""
    from fewshot.analysis.study_report import analyse_study
    from fewshot.stats import CurveSettings

    rep = analyse_study(
        source,
        settings or CurveSettings(),
        select=select,
        baseline=baseline,
        threshold=threshold,
        include_running=include_running,
    )
    if rep.compare is None:
        from fewshot.errors import InvalidInput

        raise InvalidInput(f"no findings: the comparison was refused: {rep.compare_error}")
    return study_findings(rep)
