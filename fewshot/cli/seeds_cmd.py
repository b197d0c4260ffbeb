"""``fewshot seeds-needed``: how many seeds each comparison with the baseline needs."""

from __future__ import annotations

from typing import Annotated

import typer
from rich.table import Table

from fewshot.cli.common import (
    LedgerOpt,
    StudyOpt,
    TableJsonCsv,
    open_ledger,
    out,
    print_json,
    print_notes,
    reporting,
)
from fewshot.cli.options import STATS_FLAGS, BaselineOpt, IncludeRunningOpt, SelectOpt


def seeds_needed_cmd(
    *,
    effect: Annotated[
        float, typer.Option("--effect", help="Difference to detect, in normalised score.")
    ] = 0.1,
    power: Annotated[float, typer.Option("--power", help="Wanted power of the test.")] = 0.8,
    alpha: Annotated[float, typer.Option("--alpha", help="One-sided significance level.")] = 0.05,
    baseline: BaselineOpt = None,
    select: SelectOpt = "final",
    include_running: IncludeRunningOpt = False,
    fmt: Annotated[
        TableJsonCsv, typer.Option("--format", help="table, csv or json.")
    ] = TableJsonCsv.table,
    ledger: LedgerOpt = None,
    study: StudyOpt = None,
) -> None:
    """Seeds each comparison needs to detect --effect, by Welch's t power, from the spread seen so far."""
    from fewshot.analysis import seeds_json, seeds_needed_report

    with reporting(STATS_FLAGS):
        led = open_ledger(ledger, study)
        try:
            rep = seeds_needed_report(
                led,
                effect=effect,
                power=power,
                alpha=alpha,
                baseline=baseline,
                select=select,
                include_running=include_running,
            )
        finally:
            led.close()
    table, base, value = rep.table, rep.baseline, rep.value
    if fmt is TableJsonCsv.json:
        print_json(seeds_json(rep), STATS_FLAGS)
        return
    if fmt is TableJsonCsv.csv:
        typer.echo(table.to_csv(index=False), nl=False)
        return
    t = Table(
        title=f"seeds per arm to detect +{effect:g} ({value}) against {base}, power {power:g}, "
        f"one-sided alpha {alpha:g} (Welch)",
        title_justify="left",
    )
    for c in (
        "arm",
        "task",
        "size",
        "pilot seeds",
        "sd arm",
        "sd baseline",
        "power now",
        "seeds needed",
    ):
        t.add_column(c, justify="left" if c in ("arm", "task") else "right")
    for _, r in table.iterrows():
        needed = (
            "> 10000"
            if r["seeds_needed"] is None or r["seeds_needed"] != r["seeds_needed"]
            else str(int(r["seeds_needed"]))
        )
        t.add_row(
            r["arm"],
            r["task"],
            str(r["size"]),
            str(r["pilot_seeds"]),
            f"{r['sd_arm']:.3g}",
            f"{r['sd_baseline']:.3g}",
            f"{r['power_now']:.2f}",
            needed,
        )
    out.print(t)
    print_notes(rep.notes, STATS_FLAGS)
