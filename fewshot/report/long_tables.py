"""The report's long tables (curves, transfer) kept readable: a summary first, the full table
behind it.

A table of more than :data:`LONG_ROWS` rows (40 tasks × 8 arms × 9 sizes gives thousands) is shown
as a short summary read off the reports (never a statistic computed here) followed by the full
table inside a ``<details>`` element, which a reader opens when they need a row. Up to
:data:`LONG_ROWS` rows the table is shown as it is.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Sequence
from html import escape

import pandas as pd

from fewshot.analysis import CompareReport, StudyReports
from fewshot.report.html import paragraph, table_html
from fewshot.tables import flagged, number, threshold_cell, transfer_rows, with_interval

__all__ = ["LONG_ROWS", "collapsed", "curve_section", "transfer_section", "wide_cells"]

LONG_ROWS = 40


def collapsed(
    rows: Sequence[dict[str, str]],
    *,
    what: str,
    numeric: Iterable[str] = (),
    summary: str = "",
) -> str:
    """``rows`` as a table; beyond :data:`LONG_ROWS` rows, ``summary`` (escaped HTML) and then
    the full table in a ``<details>`` element whose line says ``what`` it holds."""
    full = table_html(rows, numeric=numeric)
    if len(rows) <= LONG_ROWS:
        return full
    line = escape(f"{what}: all {len(rows)} rows (open to read them)")
    return f"{summary}<details><summary>{line}</summary>{full}</details>"


def interval_cell(row: pd.Series, value: str = "estimate") -> str:
    """``estimate [low, high]`` of a row, flagged when it rests on too few seeds."""
    return flagged(with_interval(row[value], row["low"], row["high"]), row.get("n_seeds"))


def wide_cells(
    frame: pd.DataFrame,
    rows: str,
    columns: str,
    cell: Callable[[pd.Series], str],
    *,
    prefix: str = "",
) -> list[dict[str, str]]:
    """``frame`` laid out wide: one row per value of ``rows`` (in order of appearance), one
    column per value of ``columns`` (sorted; named ``prefix`` + value), ``cell(row)`` in each
    ("-" where the frame has no such row)."""
    if frame.empty:
        return []
    heads = sorted(set(frame[columns]))
    table: dict[object, dict[str, str]] = {}
    for _, r in frame.iterrows():
        line = table.setdefault(
            r[rows], {rows: str(r[rows]), **{f"{prefix}{h}": "-" for h in heads}}
        )
        line[f"{prefix}{r[columns]}"] = cell(r)
    return list(table.values())


def transfer_section(cmp: CompareReport) -> str:
    """The report's transfer tables (differences, P(improvement), effective data; episodes to the
    threshold; areas), each long one behind its summary."""
    t = cmp.table
    over = t[t["task"] == "all"]
    if len(over):
        summary = paragraph(
            f"Summary: the difference from {cmp.baseline}, averaged over the {len(cmp.over_tasks)} "
            "tasks with floor and expert, per arm and size:"
        ) + table_html(
            wide_cells(over, "arm", "size", lambda r: interval_cell(r, "difference"), prefix="n")
        )
    else:
        summary = paragraph(
            f"Summary: the difference from {cmp.baseline} at each task's largest size, per arm:"
        ) + table_html(
            wide_cells(largest(t), "task", "arm", lambda r: interval_cell(r, "difference"))
        )
    body = collapsed(transfer_rows(t), what="Every arm, task and size", summary=summary)
    if len(cmp.thresholds):
        summary = ""
        if len(cmp.headline):
            summary = paragraph(
                f"Summary: the fraction of tasks above {number(cmp.threshold)} of expert, per arm "
                "and size:"
            ) + table_html(
                wide_cells(
                    cmp.headline, "arm", "size", lambda r: interval_cell(r, "fraction"), prefix="n"
                )
            )
        body += f"<h3>Episodes to reach {number(cmp.threshold)} of expert (normalised)</h3>" + (
            collapsed(
                [
                    {
                        "arm": r["arm"],
                        "task": r["task"],
                        "episodes": flagged(threshold_cell(r), r["n_seeds"]),
                        "seeds": str(r["n_seeds"]),
                    }
                    for _, r in cmp.thresholds.iterrows()
                ],
                what="Every arm and task",
                summary=summary,
            )
        )
    if len(cmp.areas):
        body += "<h3>Area under the normalised curve (log size)</h3>" + collapsed(
            [
                {
                    "arm": r["arm"],
                    "task": r["task"],
                    "area": flagged(with_interval(r["auc"], r["low"], r["high"]), r["n_seeds"]),
                    "sizes": r["sizes"],
                    "seeds": str(r["n_seeds"]),
                }
                for _, r in cmp.areas.iterrows()
            ],
            what="Every arm and task",
            summary=paragraph("Summary: the summary figure above shows these areas per task."),
        )
    return body


def largest(table: pd.DataFrame) -> pd.DataFrame:
    """The rows at each task's largest size."""
    return table[table["size"] == table.groupby("task")["size"].transform("max")]


def curve_section(rep: StudyReports) -> str:
    """The report's curve table, behind the across-task IQM (or the curves' ends) when long."""
    curves = rep.curves
    if rep.aggregate is not None:
        t = rep.aggregate.table
        summary = paragraph(
            "Summary: the interquartile mean of normalised scores over all tasks, per arm and size "
            "(stratified t intervals):"
        ) + table_html(wide_cells(t[t["group"].isna()], "arm", "size", interval_cell, prefix="n"))
    else:
        summary = paragraph("Summary: the curves at each task's largest size, per arm:") + (
            table_html(wide_cells(largest(curves.table), "task", "arm", interval_cell))
        )
    rows = [
        {
            "arm": r["arm"],
            "task": r["task"],
            "size": str(r["size"]),
            "estimate [interval]": with_interval(r["estimate"], r["low"], r["high"]),
            "seeds": str(r["n_seeds"]),
            "note": r["note"] or "",
        }
        for _, r in curves.table.iterrows()
    ]
    label = "normalised " if curves.value == "normalised" else ""
    return paragraph(
        f"{curves.settings.estimator} of {label}{curves.scores.metric} over seeds, "
        f"{curves.settings.confidence:.0%} {curves.table['method'].iloc[0]} intervals."
    ) + collapsed(rows, what="Every arm, task and size", numeric=("size", "seeds"), summary=summary)
