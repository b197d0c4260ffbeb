"""The JSON shapes of the reports: what ``--format json`` prints, reachable from Python.

Infinity (a censored bound) is written as the string ``"inf"`` (or ``"-inf"``), never ``null``,
which means missing (pandas' own ``to_json`` writes both as ``null``).
"""

from __future__ import annotations

import math
from typing import Any

import pandas as pd

from fewshot.analysis.curves import CurveReport
from fewshot.analysis.seeds import SeedsReport
from fewshot.analysis.transfer import CompareReport

__all__ = ["json_records", "curves_table", "curves_json", "compare_json", "seeds_json"]


def json_records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    """A DataFrame's rows as JSON-ready dicts (numpy scalars as Python numbers, NaN as None,
    infinity as ``"inf"``)."""
    return [{str(k): _plain(v) for k, v in row.items()} for row in frame.to_dict(orient="records")]


def _plain(v: Any) -> Any:
    if hasattr(v, "item") and not isinstance(v, str | bytes):
        v = v.item()  # numpy scalars to Python numbers
    if isinstance(v, float):
        if math.isnan(v):
            return None
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
    if v is None or (not isinstance(v, str | int | float | bool | list | dict) and _missing(v)):
        return None
    return v


def _missing(v: Any) -> bool:
    try:
        return bool(pd.isna(v))
    except (TypeError, ValueError):
        return False


def curves_table(report: CurveReport) -> pd.DataFrame:
    """The curves as one flat table (what ``--format csv`` writes): a ``task`` column for every
    kind (empty for aggregates), the score rule and the value."""
    table = report.table.copy()
    if report.kind != "per-task":
        table.insert(2, "task", None)
    table["rule"] = report.scores.rule
    table["value"] = report.value
    return table


def curves_json(report: CurveReport) -> dict[str, Any]:
    """``{"rows": [...], "notes": [...]}`` of a curve report."""
    return {"rows": json_records(curves_table(report)), "notes": report.notes}


def compare_json(report: CompareReport) -> dict[str, Any]:
    """Every table of a compare report with its settings and notes."""
    return {
        "baseline": report.baseline,
        "value": report.value,
        "rule": report.scores.rule,
        "threshold": report.threshold,
        "tasks_in_all_rows": list(report.over_tasks),
        "rows": json_records(report.table),
        "thresholds": json_records(report.thresholds),
        "areas": json_records(report.areas),
        "fraction_of_tasks_above_threshold": json_records(report.headline),
        "scaling": json_records(report.scaling),
        "notes": report.notes,
    }


def seeds_json(report: SeedsReport) -> dict[str, Any]:
    """The seeds-needed table with its settings and notes."""
    return {
        "baseline": report.baseline,
        "effect": report.effect,
        "power": report.power,
        "alpha": report.alpha,
        "value": report.value,
        "rows": json_records(report.table),
        "notes": report.notes,
    }
