"""What a report's values rest on, said in the report: intervals clipped to the metric's declared
range, and values that include results of runs not yet done, marked.

Both are applied once, here, to report objects already computed (the statistics in
:mod:`fewshot.stats` know neither the study's bounds nor its runs' status):

- **Bounds.** A study may declare the range of its metric (``bounds = [0, 1]`` for an accuracy).
  A t interval knows nothing of it and can run past it (``[0.824, 1.02]``); no value of a cell can
  lie outside, so the part outside is cut off. What is cut depends on what the interval is of:

  * a cell (a mean, median or IQM of seeds' scores in the metric's units) lies in ``[low, high]``;
  * on normalised scores, ``(score - floor) / (expert - floor)`` maps the range to
    ``[n(low), n(high)]`` per task (sorted, for a lower-is-better metric); an aggregate over
    tasks (IQM, mean, median of pooled runs) lies within the widest of those, ``[min n(low),
    max n(high)]``, and the optimality gap ``mean(max(0, 1 - x))`` within
    ``[max(0, 1 - max n(high)), max(0, 1 - min n(low))]``;
  * a difference of two values in ``[low, high]`` lies in ``[low - high, high - low]``, not in
    ``[low, high]`` (an arm can be 0.3 behind on an accuracy): the range clipped to is that
    symmetric one, scaled by ``1 / |expert - floor|`` on normalised rows, and for a mean over
    tasks by the largest of those (a mean of differences lies within the widest task's range);
  * an area under a normalised curve (its mean height) lies in the task's normalised range, and
    the scaling view's across-task IQM in the widest of them.

  P(improvement), fractions of tasks and effective data have ranges of their own and are left
  alone. A side given as infinite clips nothing on that side. Each clipped table gets a
  ``clipped`` column (True where an end was cut) and the report a note saying how many were.

- **Unfinished runs.** With ``include_running``, :func:`study_data` reads results of runs that
  are not done (running, claimed, failed or planned) too; when the study holds any, every table
  gets an ``unfinished_runs`` column (the runs behind each value that are not done; areas and
  episodes to the threshold count the arm's runs at every size), values with one are marked ``*``
  in text tables, and the report has a note saying what the mark means.
"""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from fewshot.analysis.data import StudyData, read_study
from fewshot.tables import UNFINISHED_COLUMN, UNFINISHED_MARK

if TYPE_CHECKING:
    from fewshot.analysis.curves import CurveReport
    from fewshot.analysis.study_report import StudyReports
    from fewshot.analysis.transfer import CompareReport
    from fewshot.ledger import Ledger

__all__ = [
    "UNFINISHED_MARK",
    "UNFINISHED_COLUMN",
    "CLIPPED_COLUMN",
    "study_data",
    "qualify_curves",
    "qualify_compare",
    "qualify_study",
    "clipped_count",
]

CLIPPED_COLUMN = "clipped"
RUN_IDS = ["arm", "task", "size", "seed", "replicate"]


def study_data(
    source: Ledger | StudyData, *, include_running: bool = False, with_status: bool = False
) -> StudyData:
    """``source`` itself when it is already read (whatever it holds), else one read of the
    ledger: results of done runs only, or of every run with ``include_running``."""
    if isinstance(source, StudyData):
        return source
    # passed only when set: without it read_study counts done runs only
    extra: dict[str, Any] = {"include_running": True} if include_running else {}
    return read_study(source, with_status=with_status, **extra)


# ----------------------------------------------------------------------------- unfinished runs


def _unfinished(data: StudyData, scores: pd.DataFrame) -> pd.DataFrame | None:
    """The score rows that come from runs not done; None when the study holds no result of a
    run that is not done (read without include_running, or every run done): nothing to mark."""
    res = data.results
    if "run_status" not in res:
        return None
    keys = res.loc[res["run_status"] != "done", RUN_IDS].drop_duplicates()
    if keys.empty:
        return None
    return scores.merge(keys, on=RUN_IDS, how="inner")


def _count(table: pd.DataFrame, runs: pd.DataFrame, by: list[str]) -> np.ndarray:
    """Per row of ``table``: how many of ``runs`` share its values of ``by``."""
    if table.empty:
        return np.zeros(0, dtype=int)
    if runs.empty:
        return np.zeros(len(table), dtype=int)
    counts = runs.groupby(by, dropna=False).size().rename("_n").reset_index()
    merged = table[by].merge(counts, on=by, how="left")
    return merged["_n"].fillna(0).astype(int).to_numpy()


def _mark_note(n: int) -> str:
    return (
        f"{n} value(s) marked {UNFINISHED_MARK} include results of runs not yet done (running, "
        "claimed, failed or planned): they may change or vanish when those runs finish, fail or "
        "are retried; without `include_running` only done runs count"
    )


# ----------------------------------------------------------------------------- bounds


def _normalised_range(tasks: pd.DataFrame, bounds: tuple[float, float]) -> pd.DataFrame:
    """Per task with floor and expert: the bounds in normalised units (``n_low <= n_high``)."""
    t = tasks.dropna(subset=["floor", "expert"])
    span = (t["expert"] - t["floor"]).to_numpy(dtype=float)
    with np.errstate(invalid="ignore"):  # inf - inf cannot occur: low < high
        a = (bounds[0] - t["floor"].to_numpy(dtype=float)) / span
        b = (bounds[1] - t["floor"].to_numpy(dtype=float)) / span
    return pd.DataFrame(
        {
            "task": t["task"].to_numpy(),
            "group": t["group"].to_numpy() if "group" in t else None,
            "n_low": np.minimum(a, b),
            "n_high": np.maximum(a, b),
            "width": (bounds[1] - bounds[0]) / np.abs(span),
        }
    )


def _clip(
    table: pd.DataFrame, lo: np.ndarray, hi: np.ndarray, cols: tuple[str, str] = ("low", "high")
) -> pd.DataFrame:
    """``table`` with its interval ends ``cols`` cut to ``[lo, hi]`` per row, and a ``clipped``
    column (True where an end moved; NaN ends stay NaN)."""
    low = table[cols[0]].to_numpy(dtype=float)
    high = table[cols[1]].to_numpy(dtype=float)
    with np.errstate(invalid="ignore"):
        new_low = np.where(low < lo, lo, low)
        new_high = np.where(high > hi, hi, high)
    moved = (new_low != low) & ~np.isnan(low) | (new_high != high) & ~np.isnan(high)
    out = table.copy()
    out[cols[0]], out[cols[1]] = new_low, new_high
    out[CLIPPED_COLUMN] = moved
    return out


def clipped_count(table: pd.DataFrame) -> int:
    """How many intervals of ``table`` were clipped (0 when it was not clipped at all)."""
    return int(table[CLIPPED_COLUMN].sum()) if CLIPPED_COLUMN in table else 0


def _clip_note(study: dict[str, Any], n: int, total: int, what: str) -> str:
    lo, hi = study["bounds"]
    allowed = (
        f"differences to [{lo - hi:g}, {hi - lo:g}], areas to [{lo:g}, {hi:g}]"
        if what.startswith("intervals of differences")
        else f"[{lo:g}, {hi:g}]"
    )
    return (
        f"{n} of {total} {what} ran past the range of {study['metric']} declared by the study "
        f"([{lo:g}, {hi:g}]) and were clipped to what it allows ({allowed}; in normalised units "
        "per task where the values are normalised)"
    )


def _curve_range(report: CurveReport, data: StudyData) -> tuple[np.ndarray, np.ndarray]:
    bounds = data.study["bounds"]
    t = report.table
    if report.value == "score":
        return np.full(len(t), bounds[0]), np.full(len(t), bounds[1])
    ranges = _normalised_range(data.tasks, bounds)
    if report.kind == "per-task":
        r = t[["task"]].merge(ranges, on="task", how="left")
        return r["n_low"].to_numpy(float), r["n_high"].to_numpy(float)
    lo, hi = np.empty(len(t)), np.empty(len(t))
    for k, (_, row) in enumerate(t.iterrows()):
        own = ranges if report.kind == "across-tasks" else ranges[ranges["group"] == row["group"]]
        own = own if len(own) else ranges
        a, b = float(own["n_low"].min()), float(own["n_high"].max())
        if row["aggregate"] == "optimality_gap":  # mean(max(0, 1 - x)) for x in [a, b]
            a, b = max(0.0, 1.0 - b), max(0.0, 1.0 - a)
        lo[k], hi[k] = a, b
    return lo, hi


# ----------------------------------------------------------------------------- reports


def qualify_curves(report: CurveReport, data: StudyData) -> CurveReport:
    """``report`` clipped to the study's bounds and marked where unfinished runs enter it."""
    t, notes = report.table, list(report.notes)
    if CLIPPED_COLUMN in t or UNFINISHED_COLUMN in t:
        return report  # already qualified: applied once
    if data.study.get("bounds") is not None and len(t):
        lo, hi = _curve_range(report, data)
        t = _clip(t, lo, hi)
        if n := clipped_count(t):
            notes.append(_clip_note(data.study, n, len(t), "intervals"))
    late = _unfinished(data, report.scores.scores)
    if late is not None:
        if report.value == "normalised":
            late = late[late["reference"] == "floor/expert"]
        by = {"per-task": ["arm", "task", "size"], "across-tasks": ["arm", "size"]}.get(
            report.kind, ["arm", "group", "size"]
        )
        t = t.assign(**{UNFINISHED_COLUMN: _count(t, late, by)})
        if n := int((t[UNFINISHED_COLUMN] > 0).sum()):
            notes.append(_mark_note(n))
            t["note"] = [
                "; ".join(filter(None, [str(note or ""), f"{k} run(s) not done {UNFINISHED_MARK}"]))
                if k
                else note
                for note, k in zip(t["note"], t[UNFINISHED_COLUMN], strict=True)
            ]
    return dataclasses.replace(report, table=t, notes=notes)


def qualify_compare(report: CompareReport, data: StudyData) -> CompareReport:
    """``report``'s differences and areas clipped to what the study's bounds allow, and its
    rows marked where unfinished runs enter them."""
    t, areas, notes = report.table, report.areas, list(report.notes)
    thresholds, scaling = report.thresholds, report.scaling
    if CLIPPED_COLUMN in t or UNFINISHED_COLUMN in t:
        return report
    bounds = data.study.get("bounds")
    if bounds is not None and len(t):
        ranges = _normalised_range(data.tasks, bounds).set_index("task")
        width = np.full(len(t), bounds[1] - bounds[0], dtype=float)  # raw rows
        normed = (t["unit"] == "normalised").to_numpy()
        over = list(report.over_tasks) or list(ranges.index)
        widest = (
            float(ranges.loc[ranges.index.isin(over), "width"].max()) if len(ranges) else np.inf
        )
        per_task = t["task"].map(ranges["width"]).to_numpy(dtype=float)
        all_rows = (t["task"] == "all").to_numpy()
        width[normed] = np.where(all_rows, widest, per_task)[normed]
        t = _clip(t, -width, width)
        total, n = len(t), clipped_count(t)
        if len(areas):
            r = areas[["task"]].merge(ranges.reset_index(), on="task", how="left")
            areas = _clip(areas, r["n_low"].to_numpy(float), r["n_high"].to_numpy(float))
            total, n = total + len(areas), n + clipped_count(areas)
        if len(scaling) and len(ranges):  # the across-task IQM of normalised scores
            a, b = float(ranges["n_low"].min()), float(ranges["n_high"].max())
            scaling = _clip(scaling, np.full(len(scaling), a), np.full(len(scaling), b))
            total, n = total + len(scaling), n + clipped_count(scaling)
        if n:
            notes.append(
                _clip_note(data.study, n, total, "intervals of differences, areas and IQMs")
            )
    late = _unfinished(data, report.scores.scores)
    if late is not None:
        base = report.baseline
        mine = late[late["arm"] != base]
        theirs = late[late["arm"] == base]
        cell = _count(t, mine, ["arm", "task", "size"]) + _count(
            t.assign(arm=base), theirs, ["arm", "task", "size"]
        )
        if len(t) and (t["task"] == "all").any():  # a mean over tasks: every task's runs
            every = t.assign(task="all")
            over = late[late["task"].isin(report.over_tasks)]
            both = _count(every, over[over["arm"] != base], ["arm", "size"]) + _count(
                every.assign(arm=base), over[over["arm"] == base], ["arm", "size"]
            )
            cell = np.where((t["task"] == "all").to_numpy(), both, cell)
        t = t.assign(**{UNFINISHED_COLUMN: cell})
        if len(areas):
            areas = areas.assign(**{UNFINISHED_COLUMN: _count(areas, late, ["arm", "task"])})
        if len(thresholds):  # episodes to the threshold: read off the arm's whole curve
            thresholds = thresholds.assign(
                **{UNFINISHED_COLUMN: _count(thresholds, late, ["arm", "task"])}
            )
        if n := int((t[UNFINISHED_COLUMN] > 0).sum()):
            notes.append(_mark_note(n))
    return dataclasses.replace(
        report, table=t, areas=areas, thresholds=thresholds, scaling=scaling, notes=notes
    )


def qualify_study(reports: StudyReports) -> StudyReports:
    """Every report of ``reports`` qualified (:func:`qualify_curves`, :func:`qualify_compare`)."""
    data = reports.data

    def curves(rep: CurveReport | None) -> CurveReport | None:
        return None if rep is None else qualify_curves(rep, data)

    return dataclasses.replace(
        reports,
        curves=qualify_curves(reports.curves, data),
        normalised_curves=curves(reports.normalised_curves),
        aggregate=curves(reports.aggregate),
        compare=None if reports.compare is None else qualify_compare(reports.compare, data),
    )
