"""``fewshot summary``: the findings alone (what pretraining is worth, and how sure we are)."""

from __future__ import annotations

from enum import StrEnum
from typing import Annotated

import typer

from fewshot.cli.common import LedgerOpt, StudyOpt, open_ledger, out, print_json, reporting
from fewshot.cli.options import (
    STATS_FLAGS,
    BaselineOpt,
    StatsOptions,
    ThresholdOpt,
    statistics_options,
)


class SummaryFormat(StrEnum):
    text = "text"
    json = "json"
    markdown = "markdown"


@statistics_options(metric=False)
def summary(
    *,
    baseline: BaselineOpt = None,
    threshold: ThresholdOpt = 0.8,
    fmt: Annotated[
        SummaryFormat,
        typer.Option(
            "--format", help="text, json or markdown (for a paper's draft or a notebook)."
        ),
    ] = SummaryFormat.text,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
    stats: StatsOptions,
) -> None:
    """The findings summary alone: each pretrained arm against the baseline, with intervals."""
    from fewshot.analysis import summarise_study

    with reporting(STATS_FLAGS):
        settings = stats.settings()
        led = open_ledger(ledger, study)
        try:
            found = summarise_study(
                led, settings, baseline=baseline, threshold=threshold, **stats.scoring()
            )
        finally:
            led.close()
    if fmt is SummaryFormat.json:
        print_json(found.to_json())
    elif fmt is SummaryFormat.markdown:
        typer.echo(found.markdown(), nl=False)
    else:
        out.print(found.text(out.width), markup=False, highlight=False)
