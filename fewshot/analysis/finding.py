"""The findings summary's sentences as objects: each :class:`Finding` with the row it was read
from, and :class:`Findings` with its plain-text, Markdown and JSON forms (built by
:mod:`fewshot.analysis.findings`)."""

from __future__ import annotations

import math
import textwrap
from dataclasses import asdict, dataclass, field
from typing import Any

__all__ = ["Finding", "Findings"]


@dataclass(frozen=True)
class Finding:
    """One sentence of the summary and where its number came from.

    ``source`` names the report table (``compare.table``, ``compare.thresholds``,
    ``aggregate.table``); ``arm``, ``task`` and ``size`` name its row; ``kind`` says what the
    sentence claims (``zero-shot``, ``ahead``, ``behind``, ``no clear difference``,
    ``multiplier``, ``threshold``, ``best``, ``no clear best``).
    """

    arm: str
    kind: str
    text: str
    source: str
    task: str
    size: int | None
    estimate: float | None
    low: float | None
    high: float | None
    n_seeds: int
    tasks: tuple[str, ...]


@dataclass(frozen=True)
class Findings:
    """The findings summary of a comparison: its sentences in the order they are read."""

    baseline: str
    threshold: float
    confidence: float
    statements: list[Finding] = field(default_factory=list)
    preamble: list[str] = field(default_factory=list)

    def text(self, width: int | None = None) -> str:
        """Plain text, one sentence a paragraph, wrapped at ``width`` columns when given."""
        lines = list(self.preamble)
        arm = None
        for f in self.statements:
            if f.arm != arm:
                arm = f.arm
                lines.append(
                    f"{arm}:" if f.kind not in ("best", "no clear best") else "Across arms:"
                )
            lines.append(f"  - {f.text}")
        if width:
            lines = [
                textwrap.fill(
                    line,
                    width,
                    subsequent_indent="    " if line[:3] == "  -" else "",
                    break_on_hyphens=False,
                )
                for line in lines
            ]
        return "\n".join(lines)

    def markdown(self) -> str:
        """Markdown for a paper's draft or a lab notebook."""
        lines = ["## Findings", "", *self.preamble, ""]
        arm = None
        for f in self.statements:
            if f.arm != arm:
                arm = f.arm
                head = "Across arms" if f.kind in ("best", "no clear best") else f"`{arm}`"
                lines += ["", f"**{head}**", ""]
            lines.append(f"- {f.text}")
        return "\n".join(lines).strip() + "\n"

    def to_json(self) -> dict[str, Any]:
        """The sentences with their numbers, rows and seeds."""
        return {
            "baseline": self.baseline,
            "threshold": self.threshold,
            "confidence": self.confidence,
            "preamble": self.preamble,
            "findings": [
                {k: (list(v) if isinstance(v, tuple) else _num(v)) for k, v in asdict(f).items()}
                for f in self.statements
            ],
        }


def _num(v: Any) -> Any:
    if isinstance(v, float):
        if math.isnan(v):
            return None
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
    return v
