"""Plain exports: the same values in CSV and JSON, written as a reader expects them.

Timestamps are ISO-8601 in UTC (``2026-01-31T09:02:55.501445Z``) in both formats; JSON has no
escaped slashes, ``budget`` is a JSON object (in CSV: its JSON text), NaN is ``null``.
"""

from __future__ import annotations

import json
from enum import StrEnum
from typing import Any

__all__ = ["ExportFormat", "export_text"]


class ExportFormat(StrEnum):
    csv = "csv"
    json = "json"


def _plain_frame(frame: Any) -> Any:
    import pandas as pd

    frame = frame.copy()
    for c in frame.columns:
        if pd.api.types.is_datetime64_any_dtype(frame[c]):
            col = frame[c]
            if col.dt.tz is None:
                col = col.dt.tz_localize("UTC")
            frame[c] = col.dt.tz_convert("UTC").dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
            frame.loc[col.isna(), c] = None
    return frame


def export_text(frame: Any, fmt: str) -> str:
    """``frame`` as CSV or JSON records text (see the module's docstring)."""
    plain = _plain_frame(frame)
    if fmt == "csv":
        return str(plain.to_csv(index=False))
    from fewshot.analysis.shapes import json_records

    records = json_records(plain)
    for r in records:
        b = r.get("budget")
        if isinstance(b, str):
            try:
                r["budget"] = json.loads(b)
            except ValueError:
                pass
    return json.dumps(records, indent=2, ensure_ascii=False) + "\n"
