"""Putting a study right by hand: ``void`` and ``retry``."""

from __future__ import annotations

from typing import Annotated

import typer

from fewshot.cli.common import LedgerOpt, StudyOpt, open_ledger, out, reporting


def void(
    run: Annotated[str, typer.Argument(help="The run key, e.g. arm/task/n10/s0.")],
    *,
    reason: Annotated[str, typer.Option("--reason", help="Why the results are voided.")],
    metric: Annotated[
        str | None, typer.Option("--metric", help="Void only this metric's results.")
    ] = None,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
) -> None:
    """Void a run's results: kept (with who, when and why), left out of every statistic; a run
    whose final result was voided goes back to the plan."""
    with reporting({"reason": "--reason", "metric": "--metric"}):
        led = open_ledger(ledger, study)
        try:
            rep = led.void(run, reason=reason, metric=metric)
        finally:
            led.close()
    again = "; its final result was voided, so it is planned again" if rep.replanned else ""
    out.print(f"{run}: {rep.voided} result(s) voided{again}")


def retry(
    runs: Annotated[
        list[str] | None, typer.Argument(help="Run keys to put back to the plan.")
    ] = None,
    *,
    failed: Annotated[bool, typer.Option("--failed", help="Retry every failed run.")] = False,
    arm: Annotated[str | None, typer.Option("--arm", help="Runs of this arm.")] = None,
    task: Annotated[str | None, typer.Option("--task", help="Runs of this task.")] = None,
    size: Annotated[int | None, typer.Option("--size", help="Runs of this size.")] = None,
    seed: Annotated[int | None, typer.Option("--seed", help="Runs of this seed.")] = None,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
) -> None:
    """Put runs back to the plan (attempts kept): RUN keys, --failed, or --arm/--task/--size/--seed."""
    flags = {
        "runs": "RUN keys",
        "failed": "--failed",
        "arm": "--arm",
        "task": "--task",
        "size": "--size",
        "seed": "--seed",
    }
    with reporting(flags):
        led = open_ledger(ledger, study)
        try:
            keys = led.retry(runs or (), failed=failed, arm=arm, task=task, size=size, seed=seed)
        finally:
            led.close()
    shown = ", ".join(keys[:5]) + (f" and {len(keys) - 5} more" if len(keys) > 5 else "")
    out.print(f"{len(keys)} run(s) planned again" + (f": {shown}" if keys else ""))
