"""The typer application: global options and the list of commands."""

from __future__ import annotations

from typing import Annotated

import typer

from fewshot import __version__
from fewshot.cli import (
    compare_cmd,
    demo_cmd,
    draw_cmd,
    repair_cmd,
    results_cmd,
    runs_cmd,
    seeds_cmd,
    stats_cmd,
    study_cmd,
    summary_cmd,
)
from fewshot.cli.cluster_cmd import work
from fewshot.cli.common import STATE
from fewshot.cli.slurm_cmd import slurm

app = typer.Typer(
    name="fewshot",
    help="Draw nested training subsets, track fine-tuning runs, and report transfer honestly.",
    context_settings={"help_option_names": ["-h", "--help"]},
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_show_locals=False,
)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"fewshot {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: Annotated[
        bool,
        typer.Option(
            "--version", callback=_version, is_eager=True, help="Print the version and exit."
        ),
    ] = False,
    debug: Annotated[
        bool, typer.Option("--debug", help="Show the full traceback of an error.")
    ] = False,
) -> None:
    STATE["debug"] = debug


app.command("draw")(draw_cmd.draw)
app.command("verify")(draw_cmd.verify)
app.command("check")(study_cmd.check)
app.command("init")(study_cmd.init)
app.command("next")(runs_cmd.next_run)
NO_MIX = {"allow_interspersed_args": False}
app.command("work", context_settings=NO_MIX)(work)
app.command(
    "exec",
    context_settings=NO_MIX,
    hidden=True,
    help="Renamed to `fewshot work` (the same command, every option of it).",
)(work)
app.command("slurm", context_settings=NO_MIX)(slurm)
app.command("jobs")(runs_cmd.jobs)
app.command("done")(runs_cmd.done)
app.command("fail")(runs_cmd.fail)
app.command("record")(results_cmd.record)
app.command("ingest")(results_cmd.ingest)
app.command("status")(results_cmd.status)
app.command("export")(results_cmd.export)
app.command("void")(repair_cmd.void)
app.command("retry")(repair_cmd.retry)
app.command("curves")(stats_cmd.curves_cmd)
app.command("compare")(compare_cmd.compare)
app.command("plot")(stats_cmd.plot)
app.command("report")(stats_cmd.report)
app.command("demo")(demo_cmd.demo)
app.command("seeds-needed")(seeds_cmd.seeds_needed_cmd)
app.command("summary")(summary_cmd.summary)


def main() -> None:
    """Entry point of the ``fewshot`` console script."""
    app()
