"""The ``fewshot`` command line: thin typer commands over the library."""

from fewshot.cli.app import app, main

__all__ = ["app", "main"]
