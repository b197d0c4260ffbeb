"""The typer application: global options and the list of commands."""

from __future__ import annotations

from typing import Annotated

import typer

from fewshot import __version__
from fewshot.cli import draw_cmd
from fewshot.cli.common import STATE

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


def main() -> None:
    """Entry point of the ``fewshot`` console script."""
    app()
