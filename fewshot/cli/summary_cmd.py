"""``fewshot summary``: the findings alone (what pretraining is worth, and how sure we are)."""

from __future__ import annotations

from enum import StrEnum
from typing import Annotated

import typer

from fewshot.cli.common import LedgerOpt, StudyOpt, open_ledger, out, print_json, reporting
from fewshot.cli.flags import as_flags
from fewshot.cli.stats_cmd import (
    DEFAULT_CI,
    CiOpt,
    ConfidenceOpt,
    Estimator,
    EstimatorOpt,
    ResamplesOpt,
    SeedOpt,
    SelectOpt,
)

THRESHOLD_HELP = "Level for episodes-to-threshold, as a fraction of the expert (default 0.8)."


class SummaryFormat(StrEnum):
    text = "text"
    json = "json"
    markdown = "markdown"


def summary(
    *,
    baseline: Annotated[
        str | None,
        typer.Option("--baseline", help="The arm to compare with (default: the study's)."),
    ] = None,
    threshold: Annotated[float, typer.Option("--threshold", help=THRESHOLD_HELP)] = 0.8,
    select: SelectOpt = "final",
    estimator: EstimatorOpt = Estimator.mean,
    ci: CiOpt = DEFAULT_CI,
    confidence: ConfidenceOpt = 0.95,
    resamples: ResamplesOpt = 10_000,
    seed: SeedOpt = 0,
    fmt: Annotated[
        SummaryFormat,
        typer.Option(
            "--format", help="text, json or markdown (for a paper's draft or a notebook)."
        ),
    ] = SummaryFormat.text,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
) -> None:
    """The findings summary alone: each pretrained arm against the baseline, with intervals."""
    from fewshot.analysis import summarise_study
    from fewshot.stats import CurveSettings

    with reporting(), as_flags():
        settings = CurveSettings(estimator, ci, confidence, resamples, seed).check()
        led = open_ledger(ledger, study)
        try:
            found = summarise_study(
                led, settings, select=select, baseline=baseline, threshold=threshold
            )
        finally:
            led.close()
    if fmt is SummaryFormat.json:
        print_json(found.to_json())
    elif fmt is SummaryFormat.markdown:
        typer.echo(found.markdown(), nl=False)
    else:
        out.print(found.text(out.width), markup=False, highlight=False)
